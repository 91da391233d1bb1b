"""Conditional Monte Carlo with adapted importance sampling (conditional_is).

On top of the Asmussen-Kroese conditioning of core.estimators.conditional, the other claims of
the conditioned lines are drawn from a capped exponential tilt e^{theta min(y, c)} and their
counts from the matching tilted law, theta adapted by moment matching (cross-entropy) from a
short pilot, in a defensive mixture with the model itself. The likelihood ratio is exact for
what is drawn. Exceedance thresholds with close caps share one sample set, drawn from a mixture
of components adapted at each of them (the exact mixture likelihood ratio); risk measures and
layers a mixture adapted at a few anchor points.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from core.big_claim import BigClaim
from core.estimators.base import BlockFn, Group, work_per_sample
from core.estimators.conditional import Conditioning
from core.estimators.estimator import AmountSampler, Estimator, ModelKind, RuinRegime
from core.estimators.mixture import TiltFamily
from core.functionals import spread_out
from core.portfolio import Portfolio
from core.precision import past
from core.sampling import TiltGrid
from core.streams import Purpose, Stream

NAME = "conditional_is"
# Moment-matching updates of theta from its start, each on its own pilot block of
# ce_samples(request) draws.
_CE_ROUNDS = 2
_CE_SAMPLES = 4096
_CE_SHARE, _CE_MIN = 0.25, 1024
# Share of samples drawn from the model itself (defensive mixture, Hesterberg 1995): it caps
# the likelihood ratio at 1 / DEFENSIVE, so a region the adapted proposal neglects (one claim
# filling the gap) cannot hide behind a small reported error.
DEFENSIVE = 0.1
# The capped tilt acts up to this multiple of the threshold's share per expected claim.
_CAP_FACTOR = 3.0
# Thresholds share a sample set only when their caps are within this factor (cap_groups).
CAP_SPREAD = 1.5
# Share of samples in which one other claim of the lead line is drawn big (core.big_claim):
# the conditioned contribution peaks where a second claim is large, a region the tilt thins.
BIG_SHARE = 0.1


def capped_family(cond: Conditioning, x: float) -> TiltFamily:
    """Capped exponential tilts e^{theta min(y, c_k)} of every conditioned line's claims (the
    conditioned, largest claim itself is never tilted). The cap c_k keeps each claim's own
    heavy tail beyond it, so one big claim is still covered by the conditioning."""
    lines = cond.portfolio.lines
    grids: dict[int, TiltGrid | None] = {}
    for k in cond.heavy:
        grids[k] = TiltGrid(lines[k].paid_severity, _cap(cond, k, x))
    lead = cond.heavy[int(np.argmax(cond.pick))]
    line = lines[lead]
    big = BigClaim.for_threshold(lead, line.paid_severity, line.paid_count.mean, x)
    return TiltFamily(cond.portfolio, grids, lead=lead, big=big, big_share=BIG_SHARE)


def ce_samples(request: int | None) -> int:
    """Draws per adaptation round: _CE_SAMPLES, or a quarter of a smaller request (at least
    _CE_MIN), so that adapting a 2,000-sample request does not cost four times the request."""
    if request is None:
        return _CE_SAMPLES
    return int(min(_CE_SAMPLES, max(_CE_MIN, _CE_SHARE * request)))


def adapt(portfolio: Portfolio, x: float, seed: int, stream: Stream,
          deadline: float | None = None) -> tuple[TiltFamily, float]:
    """One threshold's adapted family and theta (adapt_many with one threshold)."""
    family, thetas = adapt_many(portfolio, np.array([x]), seed, stream, deadline)
    return family, thetas[0]


def adapt_many(portfolio: Portfolio, xs: np.ndarray, seed: int, stream: Stream,
               deadline: float | None = None, samples: int = _CE_SAMPLES
               ) -> tuple[TiltFamily, list[float]]:
    """Moment matching (the cross-entropy update of a natural exponential family) of one theta
    per threshold, from the start E_theta[S_-] = x, round r on block r of `stream`. Each round
    draws one sample set from the current mixture; weighted by the mixture's exact likelihood
    ratio it estimates every threshold's update at once. The family's caps and its big-claim
    component are set at the largest threshold (as for risk measures), so one set of reference
    points serves all. Past the deadline no further round runs: any theta keeps the estimator
    unbiased (the likelihood ratio is exact), adaptation only lowers its variance."""
    cond = Conditioning(portfolio)
    xs = np.asarray(xs, dtype=float)
    family = capped_family(cond, float(xs.max()))
    thetas = [family.theta_for(float(x)) for x in xs]
    for r in range(_CE_ROUNDS):
        if past(deadline):
            break
        rng = stream.rng(seed, r)
        j = cond.choose(samples, rng)
        draw = family.draw(thetas, samples, rng, j, defensive=DEFENSIVE)
        v = cond.values(draw, j, xs)
        refs = np.zeros(samples)
        for k in family.grids:
            score = draw.line_scores[k]
            assert score is not None
            refs += score
        totals = v.sum(axis=0)
        thetas = [family.theta_for(float(v[:, i] @ refs / totals[i]))
                  if totals[i] > 0 and np.isfinite(totals[i]) else thetas[i]
                  for i in range(xs.size)]
    return family, thetas


def _cap(cond: Conditioning, k: int, x: float) -> float:
    """Where line k's capped tilt stops for threshold x (TiltGrid may widen a degenerate one)."""
    sev = cond.portfolio.lines[k].paid_severity
    claims = max(1.0, cond.portfolio.expected_claims)
    cap = max(_CAP_FACTOR * x / claims, float(sev.isf(1e-3)))
    return min(cap, max(x, float(sev.isf(0.5))))


def _caps(cond: Conditioning, x: float) -> np.ndarray:
    return np.array([_cap(cond, k, x) for k in cond.heavy])


def cap_groups(cond: Conditioning, xs: np.ndarray) -> list[list[int]]:
    """Neighbouring thresholds whose capped tilts have caps within CAP_SPREAD of each other
    (on every tilted line). A cap far from a threshold's own costs it precision both ways
    (for 10 lognormal(0, 1) claims: a cap 2.5 times too high doubles the relative error at
    P = 1e-3, one 2.5 times too low doubles it at 1e-7), so only such thresholds can share."""
    out: list[list[int]] = []
    low: np.ndarray | None = None
    for i in (int(k) for k in np.argsort(xs, kind="stable")):
        caps = _caps(cond, float(xs[i]))
        if low is not None and np.all(caps <= CAP_SPREAD * low):
            out[-1].append(i)
        else:
            out.append([i])
            low = caps
    return out


def plan_is(portfolio: Portfolio, thresholds: np.ndarray, seed: int,
            deadline: float | None = None, samples: int | None = None) -> list[Group]:
    """Asmussen-Kroese with adapted importance sampling. Thresholds with close caps
    (cap_groups) share one sample set, drawn from the defensive mixture of their components
    (adapted jointly) and weighted by its exact likelihood ratio; each keeps its own
    diagnostics. A single threshold is the one-component case."""
    cond = Conditioning(portfolio)
    xs = np.asarray(thresholds, dtype=float)
    out = []
    for gid, members in enumerate(cap_groups(cond, xs)):
        family, thetas = adapt_many(portfolio, xs[members], seed,
                                    Stream(Purpose.ADAPT, NAME, (gid,)), deadline,
                                    ce_samples(samples))
        out.append(_is_group(cond, family, thetas, members, xs[members]))
    return out


def _is_group(cond: Conditioning, family: TiltFamily, thetas: list[float], members: list[int],
              xs: np.ndarray) -> Group:
    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(family.draw(thetas, m, rng, j, defensive=DEFENSIVE), j, xs)

    caps = ", ".join(f"line {k} cap {float(g.ref[-1]):.4g}" for k, g in family.grids.items()
                     if g is not None)
    shown = ", ".join(f"{t:.4g}" for t in thetas)
    work = work_per_sample(cond.portfolio.expected_claims, xs.size)
    return Group(tuple(members), values, work,
                 f"Asmussen-Kroese with capped exponential tilts theta = {shown} ({caps})")


def sampler(portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float], seed: int,
            deadline: float | None = None) -> BlockFn:
    """Risk-measure contributions from a defensive mixture of capped tilts, one component
    adapted at each anchor point; past the deadline no adaptation round runs (any theta keeps
    the estimate unbiased, adapt_many)."""
    cond = Conditioning(portfolio)
    cond.check_finite_means()
    family = capped_family(cond, float(max(anchors)))
    thetas = [adapt(portfolio, float(x), seed, Stream(Purpose.MEASURE_ADAPT, NAME, (i,)),
                    deadline)[1]
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
    copula_lines = False

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
             deadline: float | None = None, samples: int | None = None) -> list[Group]:
        return plan_is(portfolio, thresholds, seed, deadline, samples)

    def contributions(self, portfolio: Portfolio, points: np.ndarray, anchors: Sequence[float],
                      seed: int, *, deadline: float | None = None) -> BlockFn:
        return sampler(portfolio, points, anchors, seed, deadline)


ESTIMATOR = ConditionalIS()
