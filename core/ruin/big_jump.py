"""Finite-horizon ruin with heavy-tailed claims: conditional Monte Carlo on the largest claim.

This is the Asmussen-Kroese idea applied to the surplus path instead of a sum. Ruin by T needs
a claim, and almost surely one claim is the largest, so psi(u, T) = E[sum over claims j of
P(ruin by T and X_j is the largest | everything but X_j)]. Given the rest, write S0 for the claim
surplus with X_j set to 0 and M for the largest other claim. Claims before j do not see X_j; from
claim j on the path is S0 + X_j. So the event is

    X_j > M  and  (max_{k<j} S0_k > u  or  X_j > u - max_{k>=j} S0_k),

of probability sf(max(M, t_j)) with t_j = -inf after an earlier ruin, else u - max_{k>=j} S0_k.
The sum over the claims of a Poisson process is turned into one term by the Mecke (Palm)
formula: E[sum_j g(t_j, X_j, rest)] = lambda int_0^T E[g(s, X, Pi)] ds, so a sample is a Poisson
process of the other claims on [0, T] plus one claim at a uniform time, and contributes
lambda T sf(max(M, t)). Each contribution lies in [0, lambda T]; one big claim, the way heavy
tails cause ruin, is integrated out exactly rather than waited for, which gives the estimator
its bounded relative error in the one-big-jump regime.

Why this rather than importance sampling: heavy tails have no exponential change of measure,
and a capped tilt of the paths would need its own cross-entropy fit per capital and horizon; this
estimator has none of that, keeps one sample set for every capital, and its intervals are plain
means of bounded contributions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from core.errors import LimitError
from core.ruin import report
from core.ruin.approximations import approximation
from core.ruin.capital import Bracket
from core.ruin.process import SurplusProcess
from core.ruin.runner import Batch, Context, paths_stream, run
from core.streams import Purpose

_CELLS_PER_BLOCK = 1 << 20  # paths x claims kept in memory at once
_MIN_BLOCK, _MAX_BLOCK = 64, 4096
_MAX_CLAIMS = 200_000  # expected claims per path: beyond, a block of 64 paths outgrows memory


@dataclass(frozen=True)
class JumpPlan:
    process: SurplusProcess
    capitals: np.ndarray
    horizon: float

    @property
    def mean_claims(self) -> float:
        return self.process.claim_rate * self.horizon

    @property
    def bound(self) -> float:
        """The largest value one contribution can take."""
        return self.mean_claims

    def block(self) -> int:
        """Paths per block: as many as keep about 1M claim slots (depends on the model only)."""
        width = self.mean_claims + 6.0 * math.sqrt(self.mean_claims) + 2.0
        size = 2 ** math.floor(math.log2(max(_CELLS_PER_BLOCK / width, 1.0)))
        return int(min(_MAX_BLOCK, max(_MIN_BLOCK, size)))


def jump_values(plan: JumpPlan, m: int, rng: np.random.Generator) -> np.ndarray:
    """(m, K) contributions lambda T sf(max(M, t)) of the conditional estimator."""
    process, horizon = plan.process, plan.horizon
    sev, c = process.net_severity, process.premium
    others = rng.poisson(plan.mean_claims, m)
    width = int(others.max()) + 1
    times = np.full((m, width), np.inf)
    claims = np.zeros((m, width))
    times[:, 0] = horizon * rng.random(m)  # the conditioned claim, with X_j = 0 in the path
    slots = np.arange(1, width)[None, :] <= others[:, None]
    count = int(others.sum())
    times[:, 1:][slots] = horizon * rng.random(count)
    claims[:, 1:][slots] = sev.sample(count, rng)
    order = np.argsort(times, axis=1, kind="stable")
    times = np.take_along_axis(times, order, axis=1)
    claims = np.take_along_axis(claims, order, axis=1)
    j = np.argmax(order == 0, axis=1)
    with np.errstate(invalid="ignore"):
        s0 = np.cumsum(claims, axis=1) - c * times  # -inf in the empty slots
    rows = np.arange(m)
    prefix = np.maximum.accumulate(s0, axis=1)
    before = np.where(j > 0, prefix[rows, np.maximum(j - 1, 0)], -np.inf)
    after = np.maximum.accumulate(s0[:, ::-1], axis=1)[:, ::-1][rows, j]
    largest = claims.max(axis=1)  # the conditioned slot holds 0, empty slots 0
    u = plan.capitals[None, :]
    point = np.maximum(largest[:, None], u - after[:, None])
    point = np.where(before[:, None] > u, largest[:, None], point)
    log_v = math.log(plan.mean_claims) + np.asarray(sev.logsf(point))
    return np.exp(log_v)


class JumpRegime:
    """psi(u, T) for every capital from one sample set of the conditional estimator above."""

    name = "conditional"

    def __init__(self, ctx: Context) -> None:
        self.ctx = ctx

    @property
    def reason(self) -> str:
        return ("conditional Monte Carlo on the surplus path (Asmussen-Kroese, largest claim "
                "integrated out; Mecke formula for the Poisson claim times)")

    def estimate(self, capitals: np.ndarray, stream: int) -> Batch:
        ctx = self.ctx
        plan = JumpPlan(ctx.process, np.asarray(capitals, dtype=float), ctx.horizon)
        if plan.mean_claims > _MAX_CLAIMS:
            raise LimitError(
                "horizon",
                f"claim rate x horizon = {plan.mean_claims:.3g} expected claims per path is more "
                f"than the limit of {_MAX_CLAIMS:g}; ask for a shorter horizon",
            )

        def values(m: int, rng: np.random.Generator) -> np.ndarray:
            return jump_values(plan, m, rng)

        result = run(ctx, tuple(range(capitals.size)), values,
                     work=plan.mean_claims + 4.0 * capitals.size, block=plan.block(),
                     stream=paths_stream(Purpose.RUIN_JUMPS, self.name, stream, 0))
        diags = result.stats.diagnose()
        out = [
            report.estimate(result.stats, i, diag=diags[i], capital=float(u),
                            samples=result.samples, method=self.name, bound=plan.bound,
                            approximation=approximation(ctx, float(u)))
            for i, u in enumerate(capitals)
        ]
        return out, [result.stopped_by]

    def bracket(self, target: float) -> Bracket:
        """From 1 - exp(-lambda T sf(u + c T)) <= psi(u, T) (one claim above u + c T ruins) to a
        few times the capital where lambda T sf(u) = target."""
        process, horizon = self.ctx.process, self.ctx.horizon
        sev, lam, c = process.net_severity, process.claim_rate, process.premium
        n = lam * horizon
        lo = max(0.0, float(sev.isf(min(1.0, -math.log1p(-target) / n))) - c * horizon)
        guess = float(sev.isf(min(1.0, target / n)))
        scale = process.mean_claim
        return Bracket(lo=lo, hi=4.0 * max(guess, lo) + scale, log_u=True, sure_hi=False,
                       scale=scale)
