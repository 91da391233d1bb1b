"""Ruin probabilities from surplus paths under an exponential change of measure.

Infinite horizon (Siegmund's algorithm): claims are tilted by the adjustment coefficient gamma
and arrive at rate lambda M(gamma); the claim surplus then drifts upwards, so every path passes
every capital, and exp(-gamma S_tau(u)) = exp(-gamma (u + overshoot)) at the first passage
estimates psi(u) with bounded relative error. One sample set serves every capital.

Finite horizon: the same paths stopped at min(tau, T), contribution dP/dQ 1{tau <= T}. For a
capital u beyond kappa'(gamma) T ruin by T is rare even under gamma's measure; such a capital
gets the steeper tilt a with kappa'(a) = u / T, under which ruin typically happens just at T
(core.ruin.lundberg); capitals that share a tilt share a sample set.

Without a tilt (a = 0) the same code is crude simulation of the process up to T.
"""

from __future__ import annotations

import math

import numpy as np

from core.results import RuinEstimate
from core.ruin import report
from core.ruin.approximations import approximation
from core.ruin.capital import Bracket
from core.ruin.lundberg import doob_capital, horizon_tilt
from core.ruin.measure import ClaimTilt, claim_tilt, exact_tilt, siegmund_tilt
from core.ruin.paths import PATHS_PER_BLOCK, PathPlan, passage_values
from core.ruin.runner import Batch, Context, paths_stream, run
from core.streams import Purpose, Stream


class PathRegime:
    def __init__(self, ctx: Context, *, tilted: bool) -> None:
        self.ctx, self.tilted = ctx, tilted
        self.name = "tilted" if tilted else "crude"
        process, gamma = ctx.process, ctx.gamma
        self.siegmund: ClaimTilt | None = None
        if tilted and gamma is not None:
            self.siegmund = siegmund_tilt(process, gamma)

    @property
    def reason(self) -> str:
        if not self.tilted:
            return f"crude simulation of the surplus process up to the horizon {self.ctx.horizon:g}"
        gamma = self.ctx.gamma
        if gamma is None:
            return ("no adjustment coefficient: paths tilted by "
                    "a with kappa'(a) = u / T, stopped at the horizon")
        text = (f"Siegmund's algorithm: claims tilted by the adjustment coefficient gamma = "
                f"{gamma:.6g}, estimator exp(-gamma S_tau) at the first passage")
        if self.siegmund is not None and self.siegmund.step is not None:
            text += (f" (claims drawn from a stepwise tilt, whose own root gamma_s = "
                     f"{self.siegmund.a:.6g} makes the likelihood ratio exact)")
        if math.isfinite(self.ctx.horizon):
            text += ("; paths stopped at the horizon, capitals beyond kappa'(gamma) T tilted by "
                     "a with kappa'(a) = u / T")
        return text

    def tilt_for(self, u: float) -> ClaimTilt:
        sev = self.ctx.process.net_severity
        if not self.tilted:
            tilt = exact_tilt(sev, 0.0)
            assert tilt is not None
            return tilt
        ctx = self.ctx
        a = horizon_tilt(ctx.process, u, ctx.horizon, ctx.gamma)
        if self.siegmund is not None and a == ctx.gamma:
            return self.siegmund
        return claim_tilt(sev, a)

    def bracket(self, target: float) -> Bracket | None:
        ctx = self.ctx
        hi = doob_capital(ctx.process, target, ctx.horizon, ctx.gamma)
        if hi is None:
            return None
        return Bracket(lo=0.0, hi=hi, log_u=False, sure_hi=True)

    def estimate(self, capitals: np.ndarray, stream: int, *, tilt_at: float | None = None
                 ) -> Batch:
        """Estimates at `capitals`; with tilt_at, every capital shares the tilt for that one."""
        shared = None if tilt_at is None else self.tilt_for(tilt_at)
        sets: dict[float, tuple[ClaimTilt, list[int]]] = {}
        for i, u in enumerate(capitals):
            tilt = shared or self.tilt_for(float(u))
            sets.setdefault(tilt.a, (tilt, []))[1].append(i)
        found: dict[int, RuinEstimate] = {}
        stops = []
        for part, (tilt, idx) in enumerate(sets.values()):
            key = paths_stream(Purpose.RUIN_PATHS, self.name, stream, part)
            stops.append(self._run(capitals, tilt, idx, key, found, search=stream > 0))
        return [found[i] for i in range(capitals.size)], stops

    def _run(self, capitals: np.ndarray, tilt: ClaimTilt, idx: list[int], key: Stream,
             found: dict[int, RuinEstimate], *, search: bool = False) -> str:
        ctx = self.ctx
        mine = capitals[idx]
        # One block of the search's far-out paths can outlast the request: stop inside it.
        plan = PathPlan.build(ctx.process, tilt, mine, ctx.horizon,
                              stop_at=ctx.deadline if search else None)
        back = np.argsort(np.argsort(mine, kind="stable"), kind="stable")  # sorted -> asked

        def values(m: int, rng: np.random.Generator) -> np.ndarray:
            return passage_values(plan, m, rng)[:, back]

        result = run(ctx, tuple(idx), values, work=plan.work, block=PATHS_PER_BLOCK,
                     stream=key)
        process = ctx.process
        drift = process.claim_rate * math.expm1(tilt.log_w) - process.premium * tilt.a
        # largest contribution: e^{-a u} at most, times e^{kappa_s(a) T} under a steeper tilt
        growth = max(drift, 0.0) * ctx.horizon if math.isfinite(ctx.horizon) else 0.0
        diags = result.stats.diagnose()
        for col, i in enumerate(idx):
            u = float(capitals[i])
            found[i] = report.estimate(
                result.stats, col, diag=diags[col], capital=u, samples=result.samples,
                method=self.name,
                log_scale=-tilt.a * u, bound=math.exp(-tilt.a * u + growth),
                approximation=approximation(ctx, u),
            )
        return result.stopped_by
