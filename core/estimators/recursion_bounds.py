"""method=recursion: deterministic lower and upper bounds instead of sampling (core.recursion
for P(S > x), core.recursion_measures for VaR, TVaR and layers, core.ruin.recursion for ruin)."""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np

from core.estimators.estimator import Estimator, RuinRegime
from core.levels import Layer
from core.portfolio import Portfolio
from core.precision import Precision
from core.recursion import (
    RECURSION_MAX_CELLS,
    exceedance_bounds,
    exceedance_points,
    refine_cells,
)
from core.recursion_fft import fft_eligible, refine
from core.recursion_measures import tail_bounds
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult, TailResult


def exceedance_result(
    portfolio: Portfolio, x: np.ndarray, precision: Precision, seed: int, start: float
) -> ExceedanceResult:
    """Deterministic bounds: with a relative_error target, books of Poisson and negative
    binomial lines go to fine grids by FFT (core.recursion_fft.refine), others are refined by
    direct sums (core.recursion.refine_cells) up to the cell limit; both stop when the next
    grid would not finish within the time limit (stopped_by "time_limit", with the bounds
    reached). Without a target, one default grid."""
    target = precision.relative_error
    deadline = precision.deadline(start)
    fine = _by_transform(portfolio, x, target, deadline)
    if fine is not None:
        bounds, cells, stopped = fine
    else:
        bounds, cells, stopped = _by_direct_sums(portfolio, x, target, deadline)
    width = max((hi - lo) / 2 / pt if pt > 0 else 0.0 for lo, hi, pt in bounds)
    if stopped == "relative_error" and target is not None and width > target:
        stopped = "samples"
    estimates = []
    for xi, (lo, hi, pt) in zip(x, bounds, strict=True):
        half = (hi - lo) / 2
        diag = Diagnostics.on_grid(cells)
        estimates.append(ExceedanceEstimate(
            threshold=float(xi), value=pt, std_error=None,
            relative_error=half / pt if pt > 0 else None, ci_low=lo, ci_high=hi, samples=0,
            hits=0, diagnostics=diag, method="recursion"))
    warnings = []
    if target is not None and width > target:
        where = ("a finer grid would not finish within the time limit" if stopped == "time_limit"
                 else "no finer grid is within the limits")
        warnings.append(f"recursion bounds are {width:.3g} wide (relative half-width) on "
                        f"{cells} cells, above the target {target:g}: {where}")
    return ExceedanceResult(
        method="recursion", method_reason="deterministic lower and upper bounds requested",
        seed=seed, elapsed_s=time.monotonic() - start, stopped_by=stopped,
        mean=portfolio.mean, std_dev=portfolio.std_dev, estimates=estimates,
        warnings=warnings)


_Bounds = list[tuple[float, float, float]]


def _by_transform(portfolio: Portfolio, x: np.ndarray, target: float | None,
                  deadline: float | None) -> tuple[_Bounds, int, str] | None:
    """Fine grids by FFT (core.recursion_fft) for books of Poisson and negative binomial lines
    with a precision target: plain rounding's gap shrinks only linearly in the span, and the
    transform's cost is about linear in the cells, where direct sums grow as their square.
    None when the transform does not apply (then direct sums serve the whole request)."""
    if target is None or not fft_eligible(portfolio):
        return None
    out: _Bounds = []
    most, stops = 0, list[str]()
    for xi in x.tolist():
        if xi <= 0:
            return None
        got = refine(portfolio, float(xi), target, deadline)
        if got is None:
            return None
        out.append(got[0])
        most, stops = max(most, got[1]), [*stops, got[2]]
    stopped = next((s for s in ("time_limit", "samples") if s in stops), "relative_error")
    return out, most, stopped


def _by_direct_sums(portfolio: Portfolio, x: np.ndarray, target: float | None,
                    deadline: float | None) -> tuple[_Bounds, int, str]:
    def compute(cells: int) -> list[tuple[float, float, float]]:
        return exceedance_bounds(portfolio, x.tolist(), cells=cells,
                                 max_cells=RECURSION_MAX_CELLS, points=False)

    def width_of(bounds: list[tuple[float, float, float]]) -> float:
        return max(((hi - lo) / (hi + lo) if hi + lo > 0 else 0.0) for lo, hi, _ in bounds)

    # The three point lattices (spans h, 2h, 4h) cost about 2/3 of the two bound lattices.
    bounds, cells, stopped, _ = refine_cells(compute, width_of, target, deadline,
                                             finish_cost=0.7)
    return exceedance_points(portfolio, x.tolist(), bounds, cells), cells, stopped


class Recursion(Estimator):
    name = "recursion"
    listing = 50
    deterministic = True
    ruin_infinite = RuinRegime.BOUNDS
    ruin_finite = RuinRegime.BOUNDS  # core.ruin.recursion says why a horizon is refused

    def exceedance_bounds(self, portfolio: Portfolio, thresholds: np.ndarray,
                          precision: Precision, seed: int, start: float) -> ExceedanceResult:
        return exceedance_result(portfolio, thresholds, precision, seed, start)

    def tail_bounds(self, portfolio: Portfolio, *, levels: Sequence[float],
                    layers: Sequence[Layer], losses: Sequence[float], seed: int) -> TailResult:
        return tail_bounds(portfolio, levels=levels, layers=layers, losses=losses, seed=seed)


ESTIMATOR = Recursion()
