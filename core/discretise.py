"""Claim laws on a lattice {0, h, 2h, ..., K h} with one absorbing cell for "beyond K h".

Rounding every claim up to the next lattice point gives a law that is stochastically larger than
the claim, rounding every claim down one that is smaller; since aggregate losses are sums of
non-negative claims, the orderings carry over to every sum and so give rigorous bounds for
P(S > x). Rounding to the nearest point is the best-estimate discretisation (its error is of
order h^2, which the caller extrapolates away).

Claims are >= 0, so once a partial sum passes K h it never comes back: all mass beyond the top
can sit in one absorbing cell without changing any probability P(S > y), y <= K h. That keeps
memory bounded and means the far tail is tracked as a mass of its own, never as 1 - cdf.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import NDArray

from core.errors import MethodError, ParameterError
from core.severities import Severity

__all__ = ["ROUNDINGS", "TINY", "Grid", "Lattice", "discretise", "flush", "require_nonnegative"]

Rounding = Literal["down", "up", "nearest"]
ROUNDINGS: tuple[Rounding, ...] = ("down", "up", "nearest")

# Masses below TINY are dropped (or, for the upper bound, moved to the absorbing cell). A product
# of two masses >= TINY is a normal float, and subnormal products slow BLAS down some 60 times.
TINY = 1e-150

# Where in a cell the rounding puts its edge: a claim in (e_{k-1}, e_k] goes to lattice point k.
_EDGE_OFFSET: dict[str, float] = {"up": 0.0, "down": 1.0, "nearest": 0.5}


@dataclass(frozen=True, kw_only=True)
class Grid:
    """The lattice {0, span, ..., cells * span}; index cells + 1 stands for everything beyond."""

    span: float
    cells: int

    def __post_init__(self) -> None:
        if not (math.isfinite(self.span) and self.span > 0):
            raise ParameterError("span", f"must be a finite number > 0, got {self.span!r}")
        if self.cells < 1:
            raise ParameterError("cells", f"must be >= 1, got {self.cells!r}")

    @classmethod
    def with_top(cls, *, top: float, cells: int) -> Grid:
        """The grid whose last lattice point is exactly `top`."""
        if not (math.isfinite(top) and top > 0):
            raise ParameterError("top", f"must be a finite number > 0, got {top!r}")
        return cls(span=top / cells, cells=cells)

    @property
    def top(self) -> float:
        return self.span * self.cells

    @property
    def points(self) -> NDArray[np.float64]:
        return np.arange(self.cells + 1, dtype=np.float64) * self.span


@dataclass(frozen=True, kw_only=True)
class Lattice:
    """A law on the grid: pmf[k] = P(Y = k h) for k <= cells, and beyond = P(Y > cells h).

    `rounding` says which way it was built ("up" laws are upper bounds, "down" lower bounds); it
    fixes where negligible masses go and stops laws of different kinds being combined.
    """

    pmf: NDArray[np.float64]
    beyond: float
    rounding: Rounding

    @property
    def cells(self) -> int:
        return self.pmf.size - 1

    def exceedance(self, k: int) -> float:
        """P(Y > k h), summed from the top (small masses first) so far tails keep their digits."""
        if not 0 <= k <= self.cells:
            raise ParameterError("k", f"must be in [0, {self.cells}], got {k!r}")
        return math.fsum(self.pmf[k + 1 :]) + self.beyond

    def survival(self) -> NDArray[np.float64]:
        """s[k] = P(Y > k h) for every k, as reverse cumulative sums from the top."""
        tail = np.cumsum(self.pmf[:0:-1])[::-1]
        out = np.empty_like(self.pmf)
        out[:-1] = tail
        out[-1] = 0.0
        return out + self.beyond


def require_nonnegative(severity: Severity, name: str = "severity") -> None:
    """The recursion needs claims >= 0; a law reaching below 0 (e.g. a normal) cannot be used."""
    if severity.support_min < 0:
        raise MethodError(
            "method",
            f"the recursion needs claims >= 0, but the {name} ({severity.family}) has support "
            f"down to {severity.support_min!r}; use a Monte Carlo method, or a retention at or "
            "above 0, which makes every paid claim non-negative",
        )


def _interval_masses(severity: Severity, edges: NDArray[np.float64]) -> NDArray[np.float64]:
    """P(edges[i] < X <= edges[i + 1]) without cancellation.

    In the lower half of the law a difference of cdf values is accurate, in the upper half a
    difference of sf values: each is then a difference of two numbers below 1/2, and the
    far-tail sf comes from the law's log-space formula, so 1e-200 keeps its digits.
    """
    cdf = np.asarray(severity.cdf(edges), dtype=np.float64)
    sf = np.asarray(severity.sf(edges), dtype=np.float64)
    lower_half = cdf[1:] <= 0.5
    masses = np.where(lower_half, cdf[1:] - cdf[:-1], sf[:-1] - sf[1:])
    return np.maximum(masses, 0.0)


def discretise(severity: Severity, grid: Grid, rounding: Rounding) -> Lattice:
    """The claim law rounded onto `grid` ("up", "down" or "nearest"), with the mass beyond."""
    require_nonnegative(severity)
    if rounding not in _EDGE_OFFSET:
        raise ParameterError("rounding", f"must be one of {ROUNDINGS}, got {rounding!r}")
    k = np.arange(grid.cells + 1, dtype=np.float64)
    edges = (k + _EDGE_OFFSET[rounding]) * grid.span
    if rounding == "up":
        edges[-1] = grid.top  # the threshold itself, exactly, so no claim at it is misplaced
    # A claim in (e_{k-1}, e_k] goes to point k; the first cell also takes any mass at 0.
    masses = np.empty(grid.cells + 1)
    masses[0] = float(severity.cdf(edges[0]))
    masses[1:] = _interval_masses(severity, edges)
    beyond = float(severity.sf(edges[-1]))
    return flush(Lattice(pmf=masses, beyond=beyond, rounding=rounding))


def flush(lattice: Lattice) -> Lattice:
    """Zero masses below TINY; an upper-bound law moves them beyond the top (still an upper
    bound), the others drop them (a lower bound stays one; for the estimate it is negligible)."""
    pmf = lattice.pmf
    small = (pmf < TINY) & (pmf > 0.0)
    if not small.any():
        return lattice
    moved = math.fsum(pmf[small]) if lattice.rounding == "up" else 0.0
    pmf = np.where(small, 0.0, pmf)
    return Lattice(pmf=pmf, beyond=lattice.beyond + moved, rounding=lattice.rounding)

