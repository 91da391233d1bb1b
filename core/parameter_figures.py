"""The engine's public entry points with parameter risk: the central run, then the nested
simulation of ``core.parameter_risk`` over the same call with drawn parameters.

Each draw reruns the call with the request's seed and the estimator the central run chose
(so the draws share their random numbers), and the time left of the request's time limit.
"""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Any

from core.exceedance import METHODS, check_seed, exceedance
from core.measures import Interval, TailResult, tail_estimates
from core.parameter_risk import Figure, NestedResult, ParameterUncertainty, nested
from core.portfolio import Portfolio
from core.precision import Precision
from core.results import ExceedanceResult


def _figure(i: Interval | None) -> Figure | None:
    return None if i is None else Figure(value=i.value, ci_low=i.ci_low, ci_high=i.ci_high)


def tail_figures(result: TailResult) -> list[Figure | None]:
    """VaR and TVaR per level, then per layer its expected loss, attachment and exhaustion
    probabilities, then P(S > loss) per loss: the order ``tail_estimates`` reports them in."""
    out: list[Figure | None] = []
    for m in result.measures:
        out += [_figure(m.var), _figure(m.tvar)]
    for ly in result.layers:
        out += [_figure(ly.expected_loss), _figure(ly.probability_attach),
                _figure(ly.probability_exhaust)]
    out += [_figure(p) for p in result.loss_exceedance]
    return out


def exceedance_figures(result: ExceedanceResult) -> list[Figure | None]:
    return [Figure(value=e.value, ci_low=e.ci_low, ci_high=e.ci_high) for e in result.estimates]


def _inner(method: str, used: str) -> str:
    return used if used in METHODS and method != "recursion" else method


class _Rerun:
    """One engine call with drawn parameters, inside the request's remaining time."""

    def __init__(self, fn: Any, precision: Precision, deadline: float | None,
                 kwargs: dict[str, Any]) -> None:
        self.fn, self.precision, self.deadline, self.kwargs = fn, precision, deadline, kwargs

    def __call__(self, portfolio: Portfolio) -> Any:
        precision = self.precision
        if self.deadline is not None:
            left = max(self.deadline - time.monotonic(), 1e-3)
            precision = replace(precision, time_limit_s=left)
        return self.fn(portfolio, precision=precision, **self.kwargs)


def tail_estimates_with_parameter_risk(
    portfolio: Portfolio, uncertainty: Mapping[int, ParameterUncertainty], *,
    levels: Sequence[float] = (), layers: Sequence[Any] = (), losses: Sequence[float] = (),
    method: str = "auto", precision: Precision | None = None, seed: int | None = None,
) -> tuple[TailResult, NestedResult]:
    start = time.monotonic()
    seed = check_seed(seed)
    precision = precision or Precision()
    central = tail_estimates(portfolio, levels=levels, layers=layers, losses=losses,
                             method=method, precision=precision, seed=seed)
    rerun = _Rerun(tail_estimates, precision, precision.deadline(start),
                   {"levels": levels, "layers": layers, "losses": losses, "seed": seed,
                    "method": _inner(method, central.method)})
    return central, nested(rerun, tail_figures, central, portfolio, uncertainty, seed,
                           rerun.deadline)


def exceedance_with_parameter_risk(
    portfolio: Portfolio, uncertainty: Mapping[int, ParameterUncertainty],
    thresholds: Sequence[float], *, method: str = "auto", precision: Precision | None = None,
    seed: int | None = None,
) -> tuple[ExceedanceResult, NestedResult]:
    start = time.monotonic()
    seed = check_seed(seed)
    precision = precision or Precision()
    central = exceedance(portfolio, thresholds, method=method, precision=precision, seed=seed)

    def call(p: Portfolio, *, precision: Precision, **kwargs: Any) -> ExceedanceResult:
        return exceedance(p, thresholds, precision=precision, **kwargs)

    rerun = _Rerun(call, precision, precision.deadline(start),
                   {"seed": seed, "method": _inner(method, central.method)})
    return central, nested(rerun, exceedance_figures, central, portfolio, uncertainty, seed,
                           rerun.deadline)
