"""Conditional Monte Carlo with adapted importance sampling (conditional_is).

On top of the Asmussen-Kroese conditioning of core.estimators.conditional, the other claims of
the conditioned lines are drawn from a capped exponential tilt e^{theta min(y, c)} and their
counts from the matching tilted law, theta adapted by moment matching (cross-entropy) from a
short pilot, in a defensive mixture with the model itself. The likelihood ratio is exact for
what is drawn. Exceedance gets one adapted sample set per threshold; risk measures and layers a
mixture of components adapted at a few anchor points.
"""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np

from core.big_claim import BigClaim
from core.estimators.base import BlockFn, Group, work_per_sample
from core.estimators.conditional import Conditioning
from core.estimators.estimator import AmountSampler, Estimator, ModelKind, RuinRegime
from core.estimators.mixture import TiltFamily
from core.functionals import spread_out
from core.portfolio import Portfolio
from core.sampling import TiltGrid
from core.streams import Purpose, Stream

NAME = "conditional_is"
# Moment-matching updates of theta from its start, each on its own pilot block.
_CE_ROUNDS = 2
_CE_SAMPLES = 4096
# Share of samples drawn from the model itself (defensive mixture, Hesterberg 1995): it caps
# the likelihood ratio at 1 / DEFENSIVE, so a region the adapted proposal neglects (one claim
# filling the gap) cannot hide behind a small reported error.
DEFENSIVE = 0.1
# The capped tilt acts up to this multiple of the threshold's share per expected claim.
_CAP_FACTOR = 3.0
# Share of samples in which one other claim of the lead line is drawn big (core.big_claim):
# the conditioned contribution peaks where a second claim is large, a region the tilt thins.
BIG_SHARE = 0.1


def capped_family(cond: Conditioning, x: float) -> TiltFamily:
    """Capped exponential tilts e^{theta min(y, c_k)} of every conditioned line's claims (the
    conditioned, largest claim itself is never tilted). The cap c_k keeps each claim's own
    heavy tail beyond it, so one big claim is still covered by the conditioning."""
    lines = cond.portfolio.lines
    claims = max(1.0, cond.portfolio.expected_claims)
    grids: dict[int, TiltGrid | None] = {}
    for k in cond.heavy:
        sev = lines[k].paid_severity
        cap = max(_CAP_FACTOR * x / claims, float(sev.isf(1e-3)))
        grids[k] = TiltGrid(sev, min(cap, max(x, float(sev.isf(0.5)))))
    lead = cond.heavy[int(np.argmax(cond.pick))]
    line = lines[lead]
    big = BigClaim.for_threshold(lead, line.paid_severity, line.paid_count.mean, x)
    return TiltFamily(cond.portfolio, grids, lead=lead, big=big, big_share=BIG_SHARE)


def adapt(portfolio: Portfolio, x: float, seed: int, stream: Stream,
          deadline: float | None = None) -> tuple[TiltFamily, float]:
    """Moment matching (the cross-entropy update of a natural exponential family) from the
    start E_theta[S_-] = x, round r on block r of `stream`; returns the family and theta.
    Past the deadline no further round runs: any theta keeps the estimator unbiased (the
    likelihood ratio is exact), adaptation only lowers its variance."""
    cond = Conditioning(portfolio)
    family = capped_family(cond, x)
    theta = family.theta_for(x)
    xs = np.array([x])
    for r in range(_CE_ROUNDS):
        if deadline is not None and time.monotonic() > deadline:
            break
        rng = stream.rng(seed, r)
        j = cond.choose(_CE_SAMPLES, rng)
        draw = family.draw([theta], _CE_SAMPLES, rng, j, defensive=DEFENSIVE)
        v = cond.values(draw, j, xs)[:, 0]
        total = v.sum()
        if total > 0 and np.isfinite(total):
            refs = np.zeros(v.size)
            for k in family.grids:
                score = draw.line_scores[k]
                assert score is not None
                refs += score
            theta = family.theta_for(float(v @ refs / total))
    return family, theta


def plan_is(portfolio: Portfolio, thresholds: np.ndarray, seed: int,
            deadline: float | None = None) -> list[Group]:
    """Asmussen-Kroese with adapted importance sampling: one sample set per threshold."""
    cond = Conditioning(portfolio)
    groups = []
    for i, x in enumerate(np.asarray(thresholds, dtype=float)):
        stream = Stream(Purpose.ADAPT, NAME, (i,))
        family, theta = adapt(portfolio, float(x), seed, stream, deadline)
        groups.append(_is_group(cond, family, theta, i, float(x)))
    return groups


def _is_group(cond: Conditioning, family: TiltFamily, theta: float, i: int, x: float) -> Group:
    xs = np.array([x])

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(family.draw([theta], m, rng, j, defensive=DEFENSIVE), j, xs)

    caps = ", ".join(f"line {k} cap {float(g.ref[-1]):.4g}" for k, g in family.grids.items()
                     if g is not None)
    work = work_per_sample(cond.portfolio.expected_claims, 1)
    return Group((i,), values, work,
                 f"Asmussen-Kroese with capped exponential tilt theta = {theta:.4g} ({caps})")


def sampler(portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float], seed: int) -> BlockFn:
    """Risk-measure contributions from a defensive mixture of capped tilts, one component
    adapted at each anchor point."""
    cond = Conditioning(portfolio)
    cond.check_finite_means()
    family = capped_family(cond, float(max(anchors)))
    thetas = [adapt(portfolio, float(x), seed, Stream(Purpose.MEASURE_ADAPT, NAME, (i,)))[1]
              for i, x in enumerate(spread_out(anchors))]

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        draw = family.draw(thetas, m, rng, j, defensive=DEFENSIVE)
        return cond.values(draw, j, a, stop_loss=True)

    return values


class ConditionalIS(Estimator):
    name = NAME
    listing = 40
    # The pilot that places the risk-measure grid uses plain conditioning: no adaptation yet.
    grid_pilot = "conditional"
    serves = frozenset({ModelKind.CLAIMS, ModelKind.DEPENDENT})
    # Lognormal amounts: directional conditional MC with shifted normals.
    amount_sampler = AmountSampler.DIRECTIONAL

    def dependent_rank(self, amounts: int | None, *, measures: bool) -> int | None:
        return 0 if amounts is not None else None
    ruin_infinite = RuinRegime.GEOMETRIC_SUM
    ruin_refusal = ("conditional_is estimates the infinite-horizon Pollaczek-Khinchine sum; with "
                    "a horizon use auto, conditional, tilted or crude")

    def check(self, portfolio: Portfolio) -> None:
        Conditioning(portfolio)

    def candidate_rank(self, portfolio: Portfolio) -> int | None:
        return None if portfolio.is_light else 1

    def plan(self, portfolio: Portfolio, thresholds: np.ndarray, seed: int, *,
             deadline: float | None = None) -> list[Group]:
        return plan_is(portfolio, thresholds, seed, deadline)

    def contributions(self, portfolio: Portfolio, points: np.ndarray, anchors: Sequence[float],
                      seed: int) -> BlockFn:
        return sampler(portfolio, points, anchors, seed)


ESTIMATOR = ConditionalIS()
