"""Euler allocation of TVaR to the lines of a dependent portfolio: E[S_i | S > VaR_q].

The terms E[S_i 1{S > a}] are estimated on grid points from the same samples as VaR and TVaR,
interpolated (log-linearly) at the VaR, and scaled so that the lines add up to the reported
TVaR exactly: c_i = TVaR * e_i / sum_j e_j. The interval is conservative: the variance of the
ratio's linearisation e_i - r_i e_tot is bounded by (se_i + r_i se_tot)^2 (Cauchy-Schwarz), as
the accumulators do not keep covariances between columns.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt

from core.intervals import Z95
from core.portfolio import Portfolio

if TYPE_CHECKING:
    from core.results import MeasureEstimate

FloatArray = npt.NDArray[np.float64]


def _at(points: FloatArray, values: FloatArray, v: float) -> float:
    if np.all(values > 0):
        return float(np.exp(np.interp(v, points, np.log(values))))
    return float(np.interp(v, points, values))


def with_contributions(measure: MeasureEstimate, points: FloatArray, mean: FloatArray,
                       se: FloatArray, portfolio: Portfolio) -> MeasureEstimate:
    from dataclasses import replace

    from core.results import Contribution

    m = len(portfolio.lines)
    e = mean.reshape(points.size, m)
    s = se.reshape(points.size, m)
    v = measure.var.value
    e_v = np.array([_at(points, e[:, i], v) for i in range(m)])
    s_v = np.array([float(np.interp(v, points, s[:, i])) for i in range(m)])
    total = float(e_v.sum())
    tvar = measure.tvar.value
    if not (total > 0):
        return measure
    share = e_v / total
    contrib = tvar * share
    # Exact sum: the last line takes the rounding remainder of the others.
    contrib[-1] = tvar - float(np.sum(contrib[:-1]))
    se_tot = float(np.sqrt(np.sum(s_v**2)))
    half = Z95 * tvar / total * (s_v + share * se_tot)
    out = [Contribution(label=line.label or f"line {i}", tvar_contribution=float(contrib[i]),
                        ci_low=float(contrib[i] - half[i]), ci_high=float(contrib[i] + half[i]))
           for i, line in enumerate(portfolio.lines)]
    return replace(measure, contributions=out)
