"""Capital for a target ruin probability: the smallest u with psi(u) <= target.

psi_hat is evaluated on one sample set at a grid of capitals across a bracket. With common
random numbers every grid point sees the same paths, so psi_hat is a smooth function of u whose
crossing of the target is not blurred by independent noise from point to point. The first grid
cell where psi_hat falls to the target is found and the root located inside it by linear
interpolation of log psi_hat: in u for light tails (log psi is close to linear there, by
Cramer-Lundberg), in log(u + scale) for heavy ones (close to linear for regularly varying
tails). The interval inverts the 95% band the same way: where ci_low reaches the target is the
smallest capital the data allow, where ci_high does is the capital that suffices with 95%
confidence. A bracket whose top is not known to suffice is widened until the band crosses.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from core.precision import past
from core.results import CapitalForTarget, RuinEstimate
from core.ruin.runner import OutOfTime

GRID_POINTS = 65
WIDENINGS = 3

# estimate(capitals, stream) -> (estimates in the order of capitals, how each group stopped)
Estimator = Callable[[np.ndarray, int], tuple[list[RuinEstimate], list[str]]]


@dataclass(frozen=True)
class Bracket:
    """Capitals [lo, hi] to search; sure_hi: psi(hi) <= target is known (a rigorous bound)."""

    lo: float
    hi: float
    log_u: bool  # grid and interpolation in log(u + scale)
    sure_hi: bool
    scale: float = 1.0

    def grid(self) -> np.ndarray:
        if not self.log_u:
            return np.linspace(self.lo, self.hi, GRID_POINTS)
        s = self.scale
        return np.expm1(np.linspace(math.log1p(self.lo / s), math.log1p(self.hi / s),
                                    GRID_POINTS)) * s

    def wider(self) -> Bracket:
        return replace(self, hi=4.0 * self.hi)

    def x(self, u: float) -> float:
        return math.log1p(u / self.scale) if self.log_u else u

    def u(self, x: float) -> float:
        return math.expm1(x) * self.scale if self.log_u else x


def crossing(b: Bracket, u: np.ndarray, values: np.ndarray, target: float) -> float | None:
    """Smallest u where the interpolated curve through (u, values) reaches target."""
    below = np.flatnonzero(values <= target)
    if not below.size:
        return None
    i = int(below[0])
    if i == 0:
        return float(u[0])
    x0, x1 = b.x(float(u[i - 1])), b.x(float(u[i]))
    v0, v1 = float(values[i - 1]), float(values[i])
    if v1 > 0:
        y0, y1, y = math.log(v0), math.log(v1), math.log(target)
    else:  # the band's lower edge reached 0: no log, interpolate the values themselves
        y0, y1, y = v0, v1, target
    share = (y - y0) / (y1 - y0) if y1 != y0 else 1.0
    return b.u(x0 + share * (x1 - x0))


def _out_of_time(target: float, reached: tuple[float, float | None, float | None] | None
                 ) -> tuple[CapitalForTarget, list[str], list[str]]:
    """What the search reached when the time limit stopped it: (top of the last finished grid,
    its point and lower crossings), or nothing."""
    if reached is None:
        note = (f"capital for target {target:g}: the time limit passed before the first grid of "
                "the capital search finished; no capital found")
        return CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=None), \
            ["time_limit"], [note]
    top, point, low = reached
    note = (f"capital for target {target:g}: the time limit stopped the search; the 95% band "
            f"stays above the target up to capital {top:g} (the last grid finished), so "
            "ci_high is null" + ("" if low is not None else
                                 f" and ci_low is that capital, {top:g}"))
    return CapitalForTarget(target=target, capital=point, ci_low=top if low is None else low,
                            ci_high=None), ["time_limit"], [note]


def search(
    estimate: Estimator, bracket: Bracket, target: float, *, deadline: float | None = None
) -> tuple[CapitalForTarget, list[str], list[str]]:
    """(the capital for the target, how the runs stopped, warnings). Past `deadline` (a
    time.monotonic() value) the search stops and reports what it reached."""
    stops: list[str] = []
    b = bracket
    reached: tuple[float, float | None, float | None] | None = None
    for attempt in range(1 + WIDENINGS):
        if past(deadline):
            return _out_of_time(target, reached)
        u = b.grid()
        try:
            found, how = estimate(u, attempt + 1)
        except OutOfTime:
            return _out_of_time(target, reached)
        stops += how
        curves = [np.array([getattr(e, name) for e in found])
                  for name in ("value", "ci_low", "ci_high")]
        point, low, high = (crossing(b, u, c, target) for c in curves)
        if high is not None or b.sure_hi:
            notes = []
            if high is None:
                notes.append(f"capital for target {target:g}: the 95% band stays above the "
                             f"target up to {b.hi:g}, where psi <= target is known; ci_high is "
                             "that bound")
                high = b.hi
                point = b.hi if point is None else point
            return CapitalForTarget(target=target, capital=point, ci_low=low, ci_high=high), \
                stops, notes
        reached = (b.hi, point, low)
        if attempt < WIDENINGS:
            b = b.wider()
    note = (f"capital for target {target:g}: the 95% band stays above the target up to capital "
            f"{b.hi:g}; no capital found")
    return CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=None), stops, [note]
