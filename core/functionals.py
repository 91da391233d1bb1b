"""Per-sample contributions to P(S > a) and to the stop-loss transform E[(S - a)+] at many
points a from one sample set, for every estimator family.

Each sampler returns, for a block of m samples, an (m, 2 G) array: the first G columns are
exceedance contributions at the G points, the last G stop-loss contributions. Their means are
unbiased for P(S > a_g) and E[(S - a_g)+]; both are monotone in a sample by sample, so one
sample set serves every level and layer.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from core.errors import MethodError
from core.estimators import tilted
from core.estimators.conditional import DEFENSIVE, Conditioning, adapt, capped_family
from core.estimators.mixture import TiltFamily
from core.portfolio import Portfolio
from core.sampling import Draw, TiltGrid, draw_block
from core.severities import Severity
from core.streams import Purpose, Stream

BlockValues = Callable[[int, np.random.Generator], np.ndarray]


def excess_mean(sev: Severity, t: np.ndarray) -> np.ndarray:
    """E[(X - t)+] of a non-negative claim, for any real t."""
    inside = np.maximum(t, 0.0)
    pi = np.maximum(sev.mean - np.asarray(sev.lev(inside), dtype=float), 0.0)
    return pi + (inside - t)


def _plain_values(draw: Draw, a: np.ndarray) -> np.ndarray:
    lr = np.exp(draw.log_lr)[:, None]
    over = draw.total[:, None] - a[None, :]
    return np.hstack([(over > 0) * lr, np.maximum(over, 0.0) * lr])


def _conditional_values(cond: Conditioning, draw: Draw, j: np.ndarray, a: np.ndarray,
                        stop_loss: bool) -> np.ndarray:
    """Asmussen-Kroese for both functionals. Given the rest, the conditioned claim X of line
    J exceeds t = max(M, a - S_-) with probability Fbar(t), and on that event contributes
    E[(X - b) 1{X > t}] = E[(X - t)+] + (t - b) Fbar(t) to the stop loss, b = a - S_-."""
    lines = cond.portfolio.lines
    m = draw.total.size
    top = np.full(m, -np.inf)
    for k in cond.heavy:
        top = np.maximum(top, draw.line_max[k])
    b = a[None, :] - draw.total[:, None]
    t = np.maximum(top[:, None], b)
    exceed = np.empty_like(t)
    sl = np.zeros_like(t)
    for k in cond.heavy:
        mask = j == k
        if mask.any():
            sev = lines[k].paid_severity
            tk = t[mask]
            sf = np.exp(sev.logsf(tk))
            exceed[mask] = sf
            if stop_loss:
                sl[mask] = excess_mean(sev, tk) + (tk - b[mask]) * sf
    lr = cond.rate * np.exp(draw.log_lr)[:, None]
    exceed *= lr
    sl *= lr
    if cond.p0 > 0.0:
        light = np.zeros(m)
        for k in cond.light:
            light += draw.line_sums[k]
        over = light[:, None] - a[None, :]
        exceed += cond.p0 * (over > 0)
        sl += cond.p0 * np.maximum(over, 0.0)
    return np.hstack([exceed, sl])


def crude_sampler(portfolio: Portfolio, a: np.ndarray) -> BlockValues:
    return lambda m, rng: _plain_values(draw_block(portfolio, m, rng), a)


def conditional_sampler(portfolio: Portfolio, a: np.ndarray) -> BlockValues:
    cond = Conditioning(portfolio)
    stop_loss = _check_means(portfolio, cond)

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return _conditional_values(cond, draw_block(portfolio, m, rng, size_biased=j), j, a,
                                   stop_loss)

    return values


def conditional_is_sampler(portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float],
                           seed: int) -> BlockValues:
    """A defensive mixture of capped tilts, one component adapted at each anchor point."""
    cond = Conditioning(portfolio)
    stop_loss = _check_means(portfolio, cond)
    family = capped_family(cond, float(max(anchors)))
    thetas = [adapt(portfolio, float(x), seed,
                    Stream(Purpose.MEASURE_ADAPT, "conditional_is", (i,)))[1]
              for i, x in enumerate(spread_out(anchors))]

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        draw = family.draw(thetas, m, rng, j, defensive=DEFENSIVE)
        return _conditional_values(cond, draw, j, a, stop_loss)

    return values


def tilted_sampler(portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float]) -> BlockValues:
    """A mixture of exponential tilts, one at each anchor's saddlepoint."""
    tilted.check_light(portfolio)
    thetas = sorted({tilted.saddlepoint(portfolio, float(x)) for x in spread_out(anchors)})
    top = max(thetas)
    grids: dict[int, TiltGrid | None] = {}
    for k, line in enumerate(portfolio.lines):
        sev = line.paid_severity
        grids[k] = None if tilted.has_closed_tilt(sev) else TiltGrid.for_tilt(sev, top)
    family = TiltFamily(portfolio, grids)
    nonzero = [t for t in thetas if t > 0.0] or [0.0]
    # Thresholds below the mean need no tilt: the model itself is then a component.
    share = 1.0 / len(thetas) if 0.0 in thetas and len(thetas) > 1 else 0.0
    return lambda m, rng: _plain_values(family.draw(nonzero, m, rng, defensive=share), a)


MAX_COMPONENTS = 3


def spread_out(anchors: Sequence[float]) -> list[float]:
    """At most MAX_COMPONENTS anchors (the extremes and the middle): mixture components
    adapted at neighbouring points overlap, and each costs a pilot."""
    points = sorted(set(float(a) for a in anchors))
    if len(points) <= MAX_COMPONENTS:
        return points
    picks = np.linspace(0, len(points) - 1, MAX_COMPONENTS).round().astype(int)
    return [points[i] for i in picks]


def _check_means(portfolio: Portfolio, cond: Conditioning) -> bool:
    for k in cond.heavy:
        if not math.isfinite(portfolio.lines[k].paid_severity.mean):
            raise MethodError(
                "portfolio",
                f"line {k} has an infinite mean claim: stop-loss, TVaR and layer losses do not "
                "exist (give it a limit, or a Pareto alpha > 1)",
            )
    return True


def sampler(name: str, portfolio: Portfolio, a: np.ndarray, anchors: Sequence[float],
            seed: int) -> BlockValues:
    if name == "crude":
        return crude_sampler(portfolio, a)
    if name == "conditional":
        return conditional_sampler(portfolio, a)
    if name == "conditional_is":
        return conditional_is_sampler(portfolio, a, anchors, seed)
    if name == "tilted":
        return tilted_sampler(portfolio, a, anchors)
    raise MethodError("method", f"{name} cannot estimate risk measures")
