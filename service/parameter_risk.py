"""Parameter uncertainty of portfolio lines: schema -> core, and the nested simulation's
intervals attached to the figures of a response."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import core
from core.errors import MethodError, TailgaugeError
from core.parameter_risk import NestedResult, ParameterInterval, ParameterUncertainty
from service.pipeline import EngineCall
from service.schemas.common import PortfolioSpec
from service.schemas.exceedance import ExceedanceResponse
from service.schemas.layers import LayersResponse
from service.schemas.parameter_risk import ParameterIntervalOut
from service.schemas.risk_measures import RiskMeasuresResponse
from service.translate import finite_or_none


def uncertainty(spec: PortfolioSpec) -> dict[int, ParameterUncertainty]:
    out = {}
    for k, line in enumerate(spec.lines):
        # Lines of obligors carry no claim-size parameters (and no such field).
        given = getattr(line, "parameter_uncertainty", None)
        if given is not None:
            out[k] = ParameterUncertainty(covariance=given.covariance, draws=given.draws)
    return out


def interval(p: ParameterInterval | None) -> ParameterIntervalOut | None:
    if p is None:
        return None
    return ParameterIntervalOut(
        ci_low=finite_or_none(p.ci_low), ci_high=finite_or_none(p.ci_high),
        parameter_ci_low=finite_or_none(p.parameter_low),
        parameter_ci_high=finite_or_none(p.parameter_high),
        parameter_std_dev=finite_or_none(p.parameter_std_dev), dominant=p.dominant,
        draws=p.draws)


def _notes(nested: NestedResult) -> list[str]:
    return [*nested.warnings, f"parameter uncertainty: {nested.draws} parameter draws "
            "(nested simulation with the request's seed)"]


def attach_measures(response: RiskMeasuresResponse, nested: NestedResult,
                    n_levels: int) -> None:
    """``nested`` holds VaR, TVaR per level (levels first, then return periods), then the
    P(S > loss) figures; see core.parameter_figures.tail_figures."""
    its: Sequence[ParameterInterval | None] = nested.intervals
    for i, m in enumerate(response.measures):
        m.var_with_parameters = interval(its[2 * i])
        m.tvar_with_parameters = interval(its[2 * i + 1])
    for j, c in enumerate(response.curve):
        c.loss_with_parameters = interval(its[2 * (n_levels + j)])
    response.parameter_draws = nested.draws
    response.warnings.extend(_notes(nested))


def attach_layers(response: LayersResponse, nested: NestedResult) -> None:
    for i, ly in enumerate(response.layers):
        ly.expected_loss_with_parameters = interval(nested.intervals[3 * i])
    response.parameter_draws = nested.draws
    response.warnings.extend(_notes(nested))


def attach_exceedance(response: ExceedanceResponse, nested: NestedResult) -> None:
    for e, p in zip(response.estimates, nested.intervals, strict=True):
        e.probability_with_parameters = interval(p)
    response.parameter_draws = nested.draws
    response.warnings.extend(_notes(nested))


def engine_call(spec: PortfolioSpec, plain: Callable[..., Any],
                with_risk: Callable[..., tuple[Any, NestedResult]], portfolio: Any,
                args: tuple[Any, ...], kwargs: dict[str, Any],
                locate: Callable[[TailgaugeError], TailgaugeError] | None = None) -> EngineCall:
    """The engine call, or its parameter-risk form when some line carries
    parameter_uncertainty (absent everywhere: exactly the plain call)."""
    unc = uncertainty(spec)
    if unc and not isinstance(portfolio, core.Portfolio):
        k = min(unc)
        raise MethodError(("portfolio", "lines", k, "parameter_uncertainty"),
                          "is supported in portfolios of claim lines only (this portfolio has "
                          "lines of obligors)")
    where = translate_errors if locate is None else locate
    if not unc:
        return EngineCall(plain, (portfolio, *args), kwargs, locate=where)
    return EngineCall(with_risk, (portfolio, unc, *args), kwargs, locate=where, nested=True)


def translate_errors(exc: TailgaugeError) -> TailgaugeError:
    return exc
