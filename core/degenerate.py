"""A portfolio that surely loses nothing (every line's claim count is surely 0, e.g. fixed n = 0).

Its loss is S = 0 with probability one, so every figure is known exactly and nothing is
sampled: P(S > x) is 1 for x < 0 and 0 for x >= 0, VaR and TVaR are 0 at every level, and a
layer attaching at a >= 0 is never hit. The estimators cannot be used here (the conditional
one needs a size-biased count, E[N] > 0; the grids need a positive scale), and their answer
would be a sampled "no hit" bound where the exact answer is known.

A portfolio with an atom at zero (P(S = 0) > 0, e.g. a Poisson count) has the same exact
answer for the low levels: VaR_q = 0 and TVaR_q = E[S] / (1 - q) for q <= P(S = 0).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence

import numpy as np

from core.levels import Layer
from core.portfolio import Portfolio
from core.results import (
    Diagnostics,
    ExceedanceEstimate,
    ExceedanceResult,
    Interval,
    LayerEstimate,
    MeasureEstimate,
    TailResult,
)

METHOD = "exact"
REASON = "no line can have a claim (every claim count is surely 0): S = 0, every figure is exact"
EXACT = Diagnostics(pareto_k=None, effective_samples=0.0, largest_share=None, batch_ratio=None,
                     reliable=True, reason="exact: S = 0 surely")


def surely_zero(portfolio: Portfolio) -> bool:
    """Whether no line can pay a claim (the expected number of paid claims is 0)."""
    return all(line.paid_count.mean == 0.0 for line in portfolio.lines)


def above(x: float) -> float:
    """P(0 > x)."""
    return 1.0 if x < 0.0 else 0.0


def exceedance(thresholds: np.ndarray, seed: int, start: float) -> ExceedanceResult:
    estimates = [
        ExceedanceEstimate(
            value=above(float(x)), std_error=None, relative_error=0.0 if x < 0 else None,
            ci_low=above(float(x)), ci_high=above(float(x)), samples=0, hits=0,
            diagnostics=EXACT, threshold=float(x), method=METHOD,
        )
        for x in thresholds
    ]
    return ExceedanceResult(
        method=METHOD, method_reason=REASON, seed=seed, elapsed_s=time.monotonic() - start,
        stopped_by="exact", mean=0.0, std_dev=0.0, estimates=estimates,
    )


def _point(value: float) -> Interval:
    return Interval(value=value, ci_low=value, ci_high=value, std_error=None)


def tail(levels: np.ndarray, layers: Sequence[Layer], losses: Sequence[float], seed: int,
                 start: float) -> TailResult:
    """VaR, TVaR, layers and loss probabilities of S = 0: every figure exact, nothing sampled."""
    exact = EXACT
    measures = [MeasureEstimate(level=float(q), var=_point(0.0), tvar=_point(0.0),
                                diagnostics=exact) for q in levels]
    layer_estimates = [
        LayerEstimate(
            attachment=ly.attachment, limit=ly.limit, expected_loss=_point(0.0),
            probability_attach=_point(0.0),
            probability_exhaust=None if ly.limit is None else _point(0.0), diagnostics=exact,
        )
        for ly in layers  # attachments are >= 0: a loss of 0 never reaches a layer
    ]
    return TailResult(
        method=METHOD, method_reason=REASON, seed=seed,
        elapsed_s=time.monotonic() - start, stopped_by="exact", samples=0, mean=0.0,
        std_dev=0.0, measures=measures, layers=layer_estimates,
        loss_exceedance=[_point(above(float(x))) for x in losses],
    )


def no_loss_probability(portfolio: Portfolio) -> float | None:
    """P(S = 0) in closed form: the product of the lines' P(no paid claim), for independent
    lines whose paid claims are positive. None where it is not known so (a copula, claims
    that can be 0 or negative, an infinite mean, which leaves TVaR undefined)."""
    if portfolio.dependence is not None or not math.isfinite(portfolio.mean):
        return None
    p = 1.0
    for line in portfolio.lines:
        if float(line.paid_severity.cdf(0.0)) > 0.0:
            return None
        p *= float(line.paid_count.pmf(0))
    return p


def below_the_atom(level: float, mean: float) -> MeasureEstimate:
    """VaR and TVaR at a level q <= P(S = 0). VaR_q = inf{x : F(x) >= q} = 0, and with
    TVaR_q = (1/(1 - q)) int_q^1 VaR_u du (Acerbi and Tasche 2002) and VaR_u = 0 for
    u <= P(S = 0), TVaR_q = E[S] / (1 - q): both closed forms, nothing sampled."""
    tvar = mean / (1.0 - level)
    return MeasureEstimate(
        level=level, var=_point(0.0), tvar=_point(tvar),
        diagnostics=Diagnostics.deterministic(
            "exact: the level is at or below P(S = 0), so VaR = 0 and TVaR = E[S] / (1 - q)",
            exact=True))
