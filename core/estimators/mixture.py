"""Exponential tilts of some lines by a common theta, drawn as a mixture over several thetas.

A component with parameter theta draws each tilted line's claims from e^{theta ref(y)} f(y)/W
(ref(y) = y for a closed-form tilt; the cell's reference point for a stepwise or capped tilt)
and its random count from the matching tilted law p_n W^n / E[W^N]. Every sample is weighted
by the exact likelihood ratio of the whole mixture, 1 / sum_l a_l g_l/f (the balance
heuristic of multiple importance sampling, Veach and Guibas 1995), which needs only each
sample's counts and reference-point sums. A share of the samples may come from the model
itself (a defensive mixture, Hesterberg 1995), which caps the ratio at 1 / share.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from scipy.optimize import brentq

from core.big_claim import BigClaim
from core.portfolio import Portfolio
from core.sampling import Draw, LineProposal, StepwiseTilt, TiltGrid, draw_block


def _identity(y: np.ndarray) -> np.ndarray:
    return y


class TiltFamily:
    """grids[k]: the TiltGrid of line k, or None for a closed-form tilt of its severity.

    size_biased_line: the line whose count is size-biased minus one in a sample (conditional
    estimators), used only to centre theta (one claim of that line is not drawn)."""

    def __init__(self, portfolio: Portfolio, grids: dict[int, TiltGrid | None],
                 lead: int | None = None, big: BigClaim | None = None,
                 big_share: float = 0.0) -> None:
        self.portfolio, self.grids, self.lead = portfolio, grids, lead
        # An optional component with one big claim on a line (core.big_claim).
        self.big, self.big_share = big, (big_share if big is not None else 0.0)
        # The stepwise tilts that proposals drew from, kept so every block reuses their
        # sampling tables (building one costs more than drawing a block's claims).
        self._steps: dict[tuple[int, float], StepwiseTilt] = {}

    def _step(self, k: int, grid: TiltGrid, theta: float) -> StepwiseTilt:
        step = self._steps.get((k, theta))
        if step is None:
            step = self._steps[(k, theta)] = StepwiseTilt(grid, theta)
        return step

    def _log_w(self, k: int, theta: float) -> float:
        grid = self.grids[k]
        if grid is None:
            return float(self.portfolio.lines[k].paid_severity.cumulant(theta))
        step = self._steps.get((k, theta))
        return step.log_w if step is not None else grid.log_w(theta)

    def proposal(self, theta: float) -> tuple[list[LineProposal], list[StepwiseTilt | None]]:
        props: list[LineProposal] = []
        steps: list[StepwiseTilt | None] = []
        for k, line in enumerate(self.portfolio.lines):
            if k not in self.grids or theta == 0.0:
                props.append(LineProposal())
                steps.append(None)
                continue
            grid = self.grids[k]
            step = None if grid is None else self._step(k, grid, theta)
            log_w = self._log_w(k, theta) if step is None else step.log_w
            tilt = 0.0 if line.paid_count.kind == "fixed" else log_w
            props.append(LineProposal(count_tilt=tilt, claim_tilt=theta))
            steps.append(step)
        return props, steps

    def scores(self) -> list[Callable[[np.ndarray], np.ndarray] | None]:
        out: list[Callable[[np.ndarray], np.ndarray] | None] = []
        for k in range(len(self.portfolio.lines)):
            if k not in self.grids:
                out.append(None)
            else:
                grid = self.grids[k]
                out.append(_identity if grid is None else grid.ref_of)
        return out

    def log_f_over_g(self, theta: float, draw: Draw, cond_line: np.ndarray | None) -> np.ndarray:
        """log f/g_theta at every sample, from its counts and reference-point sums."""
        out = np.zeros(draw.total.size)
        if theta == 0.0:
            return out
        for k in self.grids:
            law = self.portfolio.lines[k].paid_count
            n = draw.line_counts[k]
            refs = draw.line_scores[k]
            assert refs is not None
            log_w = self._log_w(k, theta)
            if law.kind == "fixed":
                out += n * log_w - theta * refs
                continue
            # Claims give n log W - theta sum ref; the count adds -n log W + kappa_N(log W).
            log_m = np.full(n.size, float(law.log_mgf(log_w)))
            if cond_line is not None:
                sb = cond_line == k
                if sb.any():
                    log_m[sb] = float(law.size_biased_minus_one().log_mgf(log_w))
            out += log_m - theta * refs
        return out

    def draw(self, thetas: Sequence[float], m: int, rng: np.random.Generator,
             cond_line: np.ndarray | None = None, defensive: float = 0.0) -> Draw:
        """m samples from defensive * model (+ big_share * the big-claim component) + the rest
        shared equally by the theta components."""
        thetas = [float(t) for t in thetas]
        big = self.big if self.big_share > 0.0 else None
        head = [defensive] + ([self.big_share] if big is not None else [])
        rest = (1.0 - sum(head)) / len(thetas)
        weights = np.array(head + [rest] * len(thetas))
        counts = rng.multinomial(m, weights)
        scores = self.scores()
        parts: list[Draw] = []
        start = 0
        for c, size in enumerate(counts):
            props, steps = self.proposal(0.0 if c < len(head) else thetas[c - len(head)])
            sb = None if cond_line is None else cond_line[start:start + size]
            mask = np.ones(int(size), bool) if big is not None and c == 1 else None
            parts.append(draw_block(self.portfolio, int(size), rng, proposals=props,
                                    size_biased=sb, stepwise=steps, scores=scores,
                                    big=big, big_mask=mask))
            start += size
        draw = concat(parts)
        # log of sum_l a_l g_l/f, with the model itself as the component g_0 = f.
        terms = [np.full(m, math.log(weights[0])) if weights[0] > 0 else np.full(m, -np.inf)]
        if big is not None:
            assert draw.big_ratio is not None
            n = draw.line_counts[big.line]
            terms.append(math.log(weights[1]) + big.log_g_over_f(draw.big_ratio, n))
        for c, theta in enumerate(thetas, start=len(head)):
            terms.append(math.log(weights[c]) - self.log_f_over_g(theta, draw, cond_line))
        draw.log_lr = -np.logaddexp.reduce(np.vstack(terms), axis=0)
        for k in self.grids:
            draw.line_log_lr[k] = np.zeros(m)
        return draw

    def mean_ref(self, theta: float) -> float:
        """E_theta[sum of reference points over the tilted lines' claims]."""
        total = 0.0
        for k, grid in self.grids.items():
            law = self.portfolio.lines[k].paid_count
            sev = self.portfolio.lines[k].paid_severity
            n = law.mean
            if law.kind != "fixed" and theta != 0.0:
                n = law.tilted(self._log_w(k, theta)).mean
            if k == self.lead:
                n = max(n - 1.0, 0.0)
            if grid is None:
                per = float(sev.cumulant_derivatives(theta)[0])
            else:
                per = grid.tilted_mean_ref(theta)
            total += n * per
        return total

    def theta_for(self, target: float, bound: float = math.inf) -> float:
        """theta >= 0 whose proposal puts E[sum of reference points] at target."""

        def f(t: float) -> float:
            try:
                value = self.mean_ref(t)
            except (OverflowError, ValueError, ArithmeticError):
                return math.inf
            return value - target if math.isfinite(value) else math.inf

        if f(0.0) >= 0.0:
            return 0.0
        scale = max(self.portfolio.std_dev, 1e-300) if math.isfinite(
            self.portfolio.std_dev) else 1.0
        hi = min(1.0 / scale, bound * (1 - 1e-9))
        for _ in range(200):
            if f(hi) > 0.0:
                return float(brentq(lambda t: min(f(t), 1e300), 0.0, hi, xtol=1e-12 * hi))
            if hi >= bound * (1 - 1e-9):
                return hi
            hi = min(2.0 * hi, bound * (1 - 1e-9))
        return hi


def concat(parts: list[Draw]) -> Draw:
    def cat(name: str) -> list[Any]:  # arrays, or None where a line kept no scores
        columns = [getattr(p, name) for p in parts]
        return [None if any(c is None for c in col) else np.concatenate(col)
                for col in zip(*columns, strict=True)]

    ratios = [p.big_ratio for p in parts]
    return Draw(
        np.concatenate([p.total for p in parts]), np.concatenate([p.log_lr for p in parts]),
        cat("line_sums"), cat("line_max"), cat("line_log_lr"), cat("line_counts"),
        cat("line_scores"),
        None if any(r is None for r in ratios) else np.concatenate(ratios),  # type: ignore[arg-type]
    )
