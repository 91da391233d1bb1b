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
from core.recursion import RECURSION_CELLS, RECURSION_MAX_CELLS, exceedance_bounds
from core.recursion_measures import tail_bounds
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult, TailResult


def exceedance_result(
    portfolio: Portfolio, x: np.ndarray, precision: Precision, seed: int, start: float
) -> ExceedanceResult:
    """Deterministic bounds (core.recursion): the grid doubles until the bounds' relative
    width meets precision.relative_error (or the cell limit), else one default grid."""
    target = precision.relative_error
    cells = RECURSION_CELLS
    while True:
        bounds = exceedance_bounds(portfolio, x.tolist(), cells=cells,
                                   max_cells=RECURSION_MAX_CELLS)
        width = max((hi - lo) / 2 / pt if pt > 0 else 0.0 for lo, hi, pt in bounds)
        if target is None or width <= target or 2 * cells > RECURSION_MAX_CELLS:
            break
        cells *= 2
    stopped = "relative_error" if target is not None and width <= target else "samples"
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
        warnings.append(f"recursion bounds are {width:.3g} wide (relative half-width) at the "
                        f"cell limit {RECURSION_MAX_CELLS}, above the target {target:g}")
    return ExceedanceResult(
        method="recursion", method_reason="deterministic lower and upper bounds requested",
        seed=seed, elapsed_s=time.monotonic() - start, stopped_by=stopped,
        mean=portfolio.mean, std_dev=portfolio.std_dev, estimates=estimates,
        warnings=warnings)


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
