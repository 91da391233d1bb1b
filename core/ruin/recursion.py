"""Infinite-horizon ruin probabilities as deterministic lower and upper bounds (method recursion).

Pollaczek-Khinchine: psi(u) = P(I_1 + ... + I_N > u), N geometric with P(N = n) = (1 - rho)
rho^n and I_i integrated-tail claims: the one-line portfolio of core.ruin.geometric. Its tail is
bounded without sampling by core.recursion, which puts every claim on a lattice rounded down (a
lower bound) and up (an upper bound), so:

- at each capital asked for, exceedance_bounds gives the bounds on a grid ending exactly at it,
  and a point estimate (claims rounded to the nearest point at spans h, 2h, 4h, extrapolated to
  h = 0) kept between them;
- the capital for a target is read off one lattice reaching past it: ci_high is the smallest
  lattice capital whose upper bound is <= target (it surely suffices), ci_low the largest one
  below it whose lower bound is still > target (surely too small), so the true capital lies in
  (ci_low, ci_high]; the point is where the point estimates cross the target.

The grids start at core.recursion.RECURSION_CELLS cells and are refined while the bounds are
wider than precision.relative_error (relative half-width), up to RECURSION_MAX_CELLS, and while
the next grid is expected to finish within the time limit (core.recursion.refine_cells). There
is no sampling: samples = 0, std_error None, and the same request gives the same figures.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import TypeVar

import numpy as np

from core.discretise import Grid, Lattice
from core.errors import LimitError, MethodError
from core.portfolio import Portfolio
from core.precision import Precision, past
from core.recursion import (
    RECURSION_CELLS,
    RECURSION_MAX_CELLS,
    aggregate,
    exceedance_bounds,
    refine_cells,
)
from core.results import CapitalForTarget, Diagnostics, RuinEstimate, RuinResult
from core.ruin.approximations import approximation
from core.ruin.capital import Bracket, crossing
from core.ruin.geometric import GeometricRegime
from core.ruin.lundberg import adjustment_coefficient, lundberg_constant
from core.ruin.process import SurplusProcess
from core.ruin.runner import Context

__all__ = ["check_horizon", "ruin_bounds"]

_WIDENINGS = 4  # times the search lattice's top may be widened before giving up

T = TypeVar("T")


def check_horizon(horizon: float) -> None:
    if math.isfinite(horizon):
        raise MethodError(
            "horizon",
            "method recursion bounds the infinite-horizon ruin probability (the Pollaczek-"
            "Khinchine sum) only; leave horizon out, or use auto, tilted, conditional or crude "
            "with a horizon",
        )


def _refine(
    compute: Callable[[int], T], width_of: Callable[[T], float], target: float | None,
    deadline: float | None,
) -> tuple[T, int, str, float]:
    """compute(cells) on finer grids (core.recursion.refine_cells) until width_of(result) <=
    target: (result, cells, what stopped it, its width)."""
    return refine_cells(lambda cells: _on_grid(compute, cells), width_of, target, deadline)


def _on_grid(compute: Callable[[int], T], cells: int) -> T:
    try:
        return compute(cells)
    except LimitError as exc:
        # core.recursion names its lattice "grid"; for the caller the way out is another method
        raise LimitError("method", f"recursion: {exc.message}") from exc


def _estimates(portfolio: Portfolio, capitals: np.ndarray, ctx: Context, precision: Precision,
               deadline: float | None) -> tuple[list[RuinEstimate], str, list[str]]:
    def compute(cells: int) -> list[tuple[float, float, float]]:
        return exceedance_bounds(portfolio, capitals.tolist(), cells=cells,
                                 max_cells=RECURSION_MAX_CELLS)

    def width_of(bounds: list[tuple[float, float, float]]) -> float:
        return max((hi - lo) / 2 / pt if pt > 0 else 0.0 for lo, hi, pt in bounds)

    bounds, cells, stopped, width = _refine(compute, width_of, precision.relative_error,
                                            deadline)
    estimates = []
    for u, (lo, hi, pt) in zip(capitals, bounds, strict=True):
        half = (hi - lo) / 2
        estimates.append(RuinEstimate(
            capital=float(u), value=pt, std_error=None,
            relative_error=half / pt if pt > 0 else None, ci_low=lo, ci_high=hi, samples=0,
            hits=0, diagnostics=Diagnostics.on_grid(cells), method="recursion",
            approximation=approximation(ctx, float(u))))
    return estimates, stopped, _width_notes("the ruin probabilities' bounds", stopped, width,
                                            precision.relative_error, cells)


def _width_notes(what: str, stopped: str, width: float, target: float | None,
                 cells: int) -> list[str]:
    if target is None or stopped == "relative_error":
        return []
    why = ("a finer grid would not finish within the time limit" if stopped == "time_limit"
           else f"the cell limit {RECURSION_MAX_CELLS} is reached")
    return [f"{what} are {width:.3g} wide (relative half-width) on {cells} cells, above the "
            f"target {target:g}: {why}"]


# ------------------------------------------------------------------------ capital for a target


def _point_curve(portfolio: Portfolio, top: float, cells: int) -> np.ndarray:
    """Point estimates of psi at every 4th lattice point: claims rounded to the nearest point
    at spans h, 2h and 4h (an atom on a point counts half), extrapolated to h = 0."""
    def half_atom(divisor: int) -> np.ndarray:
        law: Lattice = aggregate(portfolio, Grid.with_top(top=top, cells=cells // divisor),
                                 "nearest")
        return (law.survival() + 0.5 * law.pmf)[:: 4 // divisor]

    fine, middle, coarse = half_atom(1), half_atom(2), half_atom(4)
    # Richardson (Romberg) steps for an error c2 h^2 + c4 h^4 + ..., as exceedance_bounds does
    return (16.0 * (4.0 * fine - middle) / 3.0 - (4.0 * middle - coarse) / 3.0) / 15.0


def _lattice(portfolio: Portfolio, top: float, cells: int
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(capitals, lower bounds, upper bounds, point estimates) of psi at every 4th point of the
    lattice of `cells` cells ending at `top` (one law serves every capital)."""
    grid = Grid.with_top(top=top, cells=cells)
    low = aggregate(portfolio, grid, "down").survival()[::4]
    up = aggregate(portfolio, grid, "up").survival()[::4]
    point = np.clip(_point_curve(portfolio, top, cells), low, up)
    return grid.points[::4], low, up, point


def _read_capital(curves: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
                  target: float) -> CapitalForTarget:
    u, low, up, point = curves
    sure = int(np.flatnonzero(up <= target)[0])  # the caller checked that the top suffices
    first_low = int(np.flatnonzero(low <= target)[0])
    # psi >= lower bound > target at every point before first_low: those capitals fall short
    ci_low = float(u[first_low - 1]) if first_low > 0 else 0.0
    at = crossing(Bracket(lo=0.0, hi=float(u[-1]), log_u=False, sure_hi=True), u, point, target)
    capital = min(max(at if at is not None else float(u[sure]), ci_low), float(u[sure]))
    return CapitalForTarget(target=target, capital=capital, ci_low=ci_low, ci_high=float(u[sure]))


class _SearchTimedOut(Exception):
    """The time limit passed between the lattices of the capital search."""


def _check_time(deadline: float | None) -> None:
    if past(deadline):
        raise _SearchTimedOut


def _search_top(portfolio: Portfolio, ctx: Context, target: float, cells: int) -> float | None:
    """A lattice top whose upper bound is <= target, from the Pollaczek-Khinchine bracket (the
    Lundberg bound exp(-gamma u) where it holds, else a few times the asymptotic's capital).
    Each lattice of a far target can take many seconds: the time limit is checked before each
    (_SearchTimedOut)."""
    bracket = GeometricRegime(ctx, "recursion").bracket(target)
    # the rounding gap lifts the upper bound over psi: start a little beyond a sure top
    top = bracket.hi * (1.25 if bracket.sure_hi else 1.0) + ctx.process.mean_claim
    for _ in range(1 + _WIDENINGS):
        _check_time(ctx.deadline)
        grid = Grid.with_top(top=top, cells=cells)
        if aggregate(portfolio, grid, "up").beyond <= target:
            return top
        top *= 2.0 if bracket.sure_hi else 4.0
    return None


def _capital_for_target(portfolio: Portfolio, ctx: Context, target: float,
                        deadline: float | None) -> tuple[CapitalForTarget, str, list[str]]:
    if target >= ctx.process.rho:
        # psi(0) = rho exactly and psi decreases: no capital is needed
        return CapitalForTarget(target=target, capital=0.0, ci_low=0.0, ci_high=0.0), \
            "samples", []
    try:
        top = _on_grid(lambda cells: _search_top(portfolio, ctx, target, cells), RECURSION_CELLS)
    except _SearchTimedOut:
        note = (f"capital for target {target:g}: the time limit passed before a lattice "
                "reaching the target was found; no capital found")
        return CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=None), \
            "time_limit", [note]
    if top is None:
        note = (f"capital for target {target:g}: the upper bound stays above the target on "
                "every lattice tried; no capital found")
        return CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=None), \
            "samples", [note]
    found = top
    if past(deadline):
        note = (f"capital for target {target:g}: the time limit passed after the search; the "
                f"lattice top {top:g} surely suffices (ci_high), the estimate was not computed")
        return CapitalForTarget(target=target, capital=None, ci_low=None, ci_high=top), \
            "time_limit", [note]

    def compute(cells: int) -> CapitalForTarget:
        return _read_capital(_lattice(portfolio, found, cells), target)

    def width_of(c: CapitalForTarget) -> float:
        assert c.capital is not None and c.ci_low is not None and c.ci_high is not None
        return (c.ci_high - c.ci_low) / 2 / c.capital if c.capital > 0 else 0.0

    wanted, cells, stopped, width = _refine(compute, width_of, ctx.precision.relative_error,
                                            deadline)
    return wanted, stopped, _width_notes(f"capital for target {target:g}: the bounds", stopped,
                                         width, ctx.precision.relative_error, cells)


# ------------------------------------------------------------------------ entry point


def ruin_bounds(
    process: SurplusProcess, capitals: np.ndarray, *, horizon: float, target: float | None,
    precision: Precision | None, seed: int, start: float,
) -> RuinResult:
    """ruin(method="recursion") for a process that satisfies the net profit condition: the
    figures' ci_low / ci_high are rigorous bounds, the value a point estimate between them."""
    check_horizon(horizon)
    precision = precision or Precision()
    deadline = precision.deadline(start)
    gamma = adjustment_coefficient(process)
    constant = lundberg_constant(process, gamma) if gamma is not None else None
    ctx = Context(process, math.inf, precision, seed, deadline, gamma, constant)
    regime = GeometricRegime(ctx, "recursion")
    estimates, stopped, warnings = _estimates(regime.portfolio, capitals, ctx, precision,
                                              deadline)
    stops = [stopped]
    wanted = None
    if target is not None:
        wanted, how, notes = _capital_for_target(regime.portfolio, ctx, target, deadline)
        stops.append(how)
        warnings += notes
    order = ("time_limit", "samples", "relative_error")
    stopped_by = next(s for s in order if s in stops)
    if stopped_by == "time_limit":
        warnings.append("the time limit stopped the grid refinement: the figures depend on how "
                        "far it got and are not reproducible exactly")
    reason = (f"recursion requested: Pollaczek-Khinchine, psi(u) = P(geometric sum of "
              f"integrated-tail claims > u) with rho = {process.rho:.6g}, bounded below and above "
              "by the discretised recursion with claims rounded down and up")
    return RuinResult(
        method="recursion", method_reason=reason, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by=stopped_by, premium_rate=process.premium, horizon=None,
        adjustment_coefficient=gamma, lundberg_constant=constant, estimates=estimates,
        capital_for_target=wanted, warnings=warnings,
    )
