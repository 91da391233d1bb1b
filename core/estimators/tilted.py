"""Exponential tilting for light-tailed portfolios.

Counts and claims are drawn from the tilted laws: claims with density e^{theta y} f(y) / M(theta),
counts of line k with P(N=n) proportional to p_n M_k(theta)^n. The sample is weighted by
exp(-theta S + kappa_S(theta)), kappa_S(theta) = sum_k log E[M_k(theta)^N_k], and theta solves
the saddlepoint equation kappa_S'(theta) = x. A claim law with no closed-form tilted sampler is
drawn from a stepwise tilt (core.sampling.StepwiseTilt) whose likelihood ratio is exact for it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy.optimize import brentq

from core.errors import LimitError, MethodError, ParameterError
from core.estimators.base import BlockFn, Group, work_per_sample
from core.estimators.estimator import Estimator, RuinRegime
from core.estimators.mixture import TiltFamily
from core.functionals import plain_values, spread_out
from core.portfolio import Portfolio
from core.sampling import LineProposal, StepwiseTilt, TiltGrid, draw_block
from core.severities import Severity


def check_light(portfolio: Portfolio) -> None:
    for k, line in enumerate(portfolio.lines):
        if line.paid_severity.tail != "light":
            raise MethodError(
                "method",
                f"tilted needs light-tailed claims; line {k} ({line.severity.family}) has no "
                "moment generating function: use conditional or auto, or give it a limit",
            )


def theta_bound(portfolio: Portfolio) -> float:
    bound = math.inf
    for line in portfolio.lines:
        sev, law = line.paid_severity, line.paid_count
        b = float(sev.cumulant_bound)
        if math.isfinite(float(law.mgf_bound)):
            # kappa_Y(theta) must stay below the count's bound.
            cap = float(law.mgf_bound)
            hi = b if math.isfinite(b) else 1e6

            def f(t: float, s: Severity = sev, c: float = cap) -> float:
                return float(s.cumulant(t)) - c

            if f(hi * (1 - 1e-12)) > 0:
                b = brentq(f, 0.0, hi * (1 - 1e-12), xtol=1e-14)
        bound = min(bound, b)
    return bound


def has_closed_tilt(sev: Severity) -> bool:
    try:
        sev.sample_tilted(0.0, 1, np.random.default_rng(0))
    except NotImplementedError:
        return False
    return True


def claim_cumulant(sev: Severity, theta: float) -> tuple[float, float]:
    """(kappa_Y, kappa_Y') of the law actually sampled: the exact tilt where one exists, else
    the stepwise tilt (its log W, differentiated numerically; only theta's choice uses it)."""
    if has_closed_tilt(sev):
        return float(sev.cumulant(theta)), float(sev.cumulant_derivatives(theta)[0])
    h = 1e-5 * max(1.0, abs(theta))
    low = max(theta - h, 0.0)
    up = StepwiseTilt.for_severity(sev, theta + h).log_w
    down = StepwiseTilt.for_severity(sev, low).log_w
    return StepwiseTilt.for_severity(sev, theta).log_w, (up - down) / (theta + h - low)


def kappa(portfolio: Portfolio, theta: float) -> tuple[float, float]:
    """(kappa_S(theta), kappa_S'(theta)) of the aggregate loss."""
    value, slope = 0.0, 0.0
    for line in portfolio.lines:
        sev, law = line.paid_severity, line.paid_count
        ky, d1 = claim_cumulant(sev, theta)
        value += float(law.log_mgf(ky))
        slope += law.tilted(ky).mean * float(d1)
    return value, slope


def _slope(portfolio: Portfolio, theta: float) -> float:
    """kappa_S'(theta), +inf where the tilt overflows (beyond any useful theta)."""
    try:
        with np.errstate(over="ignore"):
            slope = kappa(portfolio, theta)[1]
    except (OverflowError, ValueError, ParameterError):
        return math.inf
    return slope if math.isfinite(slope) else math.inf


def saddlepoint(portfolio: Portfolio, x: float) -> float:
    """theta >= 0 with kappa_S'(theta) = x (0 when x is below the mean)."""
    if x <= portfolio.mean:
        return 0.0
    bound = theta_bound(portfolio)
    if math.isfinite(bound):
        hi = bound * (1 - 1e-9)
    else:
        # Start at the scale of S and double: theta * sd(S) of order one is a mild tilt.
        hi = 1.0 / max(portfolio.std_dev, 1e-300)
        while _slope(portfolio, hi) < x and hi < 1e300:
            hi *= 2.0
    if _slope(portfolio, hi) < x:
        return hi
    return float(brentq(lambda t: min(_slope(portfolio, t), 1e300) - x, 0.0, hi,
                        xtol=1e-14 * hi, rtol=1e-12))


def _proposals(portfolio: Portfolio, theta: float
               ) -> tuple[list[LineProposal], list[StepwiseTilt | None]]:
    props: list[LineProposal] = []
    steps: list[StepwiseTilt | None] = []
    for line in portfolio.lines:
        sev = line.paid_severity
        step = None
        if theta != 0.0 and not has_closed_tilt(sev):
            step = StepwiseTilt.for_severity(sev, theta)
            ky = step.log_w
        else:
            ky = float(sev.cumulant(theta))
        props.append(LineProposal(count_tilt=ky, claim_tilt=theta))
        steps.append(step)
    return props, steps


MAX_TILTED_CLAIMS = 1e5


def _tilted_claims(portfolio: Portfolio, props: list[LineProposal]) -> float:
    """Expected claims per sample under the tilted proposal."""
    total = 0.0
    for line, prop in zip(portfolio.lines, props, strict=True):
        law = line.paid_count
        total += law.tilted(prop.count_tilt).mean if prop.count_tilt else law.mean
    return total


def plan(portfolio: Portfolio, thresholds: np.ndarray) -> list[Group]:
    check_light(portfolio)
    groups = []
    for i, x in enumerate(np.asarray(thresholds, dtype=float)):
        theta = saddlepoint(portfolio, float(x))
        props, steps = _proposals(portfolio, theta)

        def values(m: int, rng: np.random.Generator, x: float = float(x),
                   props: list[LineProposal] = props,
                   steps: list[StepwiseTilt | None] = steps) -> np.ndarray:
            draw = draw_block(portfolio, m, rng, proposals=props, stepwise=steps)
            hit = draw.total > x
            out = np.zeros(m)
            out[hit] = np.exp(draw.log_lr[hit])
            return out[:, None]

        claims = _tilted_claims(portfolio, props)
        if claims > MAX_TILTED_CLAIMS:
            raise LimitError(
                f"thresholds.{i}",
                f"{float(x):g} is so far in the tail that the tilted proposal draws about "
                f"{claims:.3g} claims per sample (limit {MAX_TILTED_CLAIMS:g})",
            )
        work = work_per_sample(claims, 0)
        groups.append(Group((i,), values, work, f"exponential tilt theta = {theta:.6g}"))
    return groups


def sampler(portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float]) -> BlockFn:
    """Risk-measure contributions from a mixture of exponential tilts, one at each anchor's
    saddlepoint."""
    check_light(portfolio)
    thetas = sorted({saddlepoint(portfolio, float(x)) for x in spread_out(anchors)})
    top = max(thetas)
    grids: dict[int, TiltGrid | None] = {}
    for k, line in enumerate(portfolio.lines):
        sev = line.paid_severity
        grids[k] = None if has_closed_tilt(sev) else TiltGrid.for_tilt(sev, top)
    family = TiltFamily(portfolio, grids)
    nonzero = [t for t in thetas if t > 0.0] or [0.0]
    # Thresholds below the mean need no tilt: the model itself is then a component.
    share = 1.0 / len(thetas) if 0.0 in thetas and len(thetas) > 1 else 0.0
    return lambda m, rng: plain_values(family.draw(nonzero, m, rng, defensive=share), a)


class Tilted(Estimator):
    name = "tilted"
    listing = 20
    ruin_infinite = RuinRegime.SIEGMUND
    ruin_finite = RuinRegime.TILTED_PATHS

    def check(self, portfolio: Portfolio) -> None:
        check_light(portfolio)

    def candidate_rank(self, portfolio: Portfolio) -> int | None:
        return 0 if portfolio.is_light else None

    def plan(self, portfolio: Portfolio, thresholds: np.ndarray, seed: int, *,
             deadline: float | None = None, samples: int | None = None) -> list[Group]:
        return plan(portfolio, thresholds)

    def contributions(self, portfolio: Portfolio, points: np.ndarray, anchors: Sequence[float],
                      seed: int, *, deadline: float | None = None) -> BlockFn:
        return sampler(portfolio, points, anchors)


ESTIMATOR = Tilted()
