"""The computing resources, each plugged into ``service.pipeline``: its schemas, its server
limits, its translation to one engine call and its response. ``KINDS`` names them for batch
runs (the contract's item kinds); the endpoints use the same objects.
"""

from __future__ import annotations

from typing import Any

import core
from core import measures
from core.credit import CreditModel
from core.errors import LimitError, TailgaugeError
from core.fitting.api import fit_claims
from core.parameter_figures import (
    exceedance_with_parameter_risk,
    tail_estimates_with_parameter_risk,
)
from service import fit_translate, limits, parameter_risk, translate
from service.pipeline import EngineCall, Resource
from service.schemas.common import PortfolioRequest
from service.schemas.exceedance import ExceedanceRequest, ExceedanceResponse
from service.schemas.fit import FitRequest, FitResponse
from service.schemas.layers import LayersRequest, LayersResponse
from service.schemas.risk_measures import RiskMeasuresRequest, RiskMeasuresResponse
from service.schemas.ruin import RuinRequest, RuinResponse
from service.settings import Settings


def _portfolio(request: PortfolioRequest, settings: Settings) -> core.Portfolio | CreditModel:
    """The request's portfolio as core objects, within the server's size limits."""
    limits.check_portfolio_size(request.portfolio, settings)
    model = translate.portfolio(request.portfolio)
    if isinstance(model, core.Portfolio):  # a credit book's cost is limited by its obligors
        limits.check_expected_claims(model, settings)
    elif model.lines:  # and a mixed book's claim lines like any claim lines
        limits.check_expected_claims(core.Portfolio(lines=[fl.line for fl in model.lines]),
                                     settings)
    return model


def _points(settings: Settings, *lists: tuple[str, list[Any]]) -> None:
    # Each listed point adds to the shared estimation grid (server limit max_thresholds).
    for field, values in lists:
        limits.check_list_length((field,), len(values), settings.max_thresholds,
                                 "max_thresholds")


def _renamed(engine_name: str, request_name: str) -> Any:
    def locate(exc: TailgaugeError) -> TailgaugeError:
        return translate.renamed(exc, engine_name, request_name)
    return locate


# --- exceedance -----------------------------------------------------------------------------


def _exceedance_call(body: ExceedanceRequest, settings: Settings) -> EngineCall:
    return parameter_risk.engine_call(
        body.portfolio, core.estimate_exceedance, exceedance_with_parameter_risk,
        _portfolio(body, settings), (body.thresholds,), {"method": body.method})


EXCEEDANCE: Resource[ExceedanceRequest, ExceedanceResponse] = Resource(
    name="exceedance", request=ExceedanceRequest, response=ExceedanceResponse,
    check=lambda body, s: _points(s, ("thresholds", body.thresholds)),
    translate=_exceedance_call,
    respond=lambda _, result, __, notes: translate.exceedance_response(result, warnings=notes),
    samples=translate.samples_behind,
    attach=lambda _, response, nested: parameter_risk.attach_exceedance(response, nested),
)


# --- risk measures --------------------------------------------------------------------------


def _risk_measures_call(body: RiskMeasuresRequest, settings: Settings) -> EngineCall:
    model = _portfolio(body, settings)
    # The engine estimates TVaR (a stop-loss transform) with every VaR, return periods too.
    translate.check_finite_means(
        model,
        "tail value-at-risk" if body.levels
        else "the stop-loss transform the engine estimates return-period losses with",
    )
    # Return period T is the VaR at level 1 - 1/T: one call, one sample set for everything.
    levels = [*body.levels, *(1.0 - 1.0 / t for t in body.return_periods)]
    # The engine names its grid points "thresholds"; the farthest point (a loss, else a
    # level's VaR) is what such an error is about.
    field = "losses" if body.losses else "levels" if body.levels else "return_periods"
    return parameter_risk.engine_call(
        body.portfolio, measures.tail_estimates, tail_estimates_with_parameter_risk, model, (),
        {"levels": levels, "losses": body.losses, "method": body.method},
        locate=_renamed("thresholds", field))


def _risk_measures_response(body: RiskMeasuresRequest, result: Any, _: EngineCall,
                            notes: list[str]) -> RiskMeasuresResponse:
    return translate.risk_measures_response(
        result, n_levels=len(body.levels), return_periods=body.return_periods,
        losses=body.losses, warnings=notes,
    )


RISK_MEASURES: Resource[RiskMeasuresRequest, RiskMeasuresResponse] = Resource(
    name="risk_measures", request=RiskMeasuresRequest, response=RiskMeasuresResponse,
    check=lambda body, s: _points(s, ("levels", body.levels),
                                  ("return_periods", body.return_periods),
                                  ("losses", body.losses)),
    translate=_risk_measures_call,
    respond=_risk_measures_response,
    samples=lambda result: int(result.samples),
    attach=lambda body, response, nested: parameter_risk.attach_measures(
        response, nested, len(body.levels)),
)


# --- layers ---------------------------------------------------------------------------------


def _layers_call(body: LayersRequest, settings: Settings) -> EngineCall:
    model = _portfolio(body, settings)
    for i, layer in enumerate(body.layers):
        if layer.limit is None:  # a limited layer's loss is bounded, so it always exists
            translate.check_finite_means(
                model, f"the expected loss of the unlimited layers[{i}]"
            )
    # The engine names its points (the layers' ends) "thresholds".
    return parameter_risk.engine_call(
        body.portfolio, measures.tail_estimates, tail_estimates_with_parameter_risk, model, (),
        {"layers": translate.layers(body.layers), "method": body.method},
        locate=_renamed("thresholds", "layers"))


LAYERS: Resource[LayersRequest, LayersResponse] = Resource(
    name="layers", request=LayersRequest, response=LayersResponse,
    check=lambda body, s: _points(s, ("layers", body.layers)),
    translate=_layers_call,
    respond=lambda _, result, __, notes: translate.layers_response(result, warnings=notes),
    samples=lambda result: int(result.samples),
    attach=lambda _, response, nested: parameter_risk.attach_layers(response, nested),
)


# --- ruin -----------------------------------------------------------------------------------


def _check_path_claims(process: core.SurplusProcess, horizon: float | None,
                       settings: Settings) -> None:
    # With a horizon every simulated path draws about lambda T claims: the cost of one path,
    # limited as a portfolio's claims per period are.
    if horizon is None:
        return
    claims = process.claim_rate * horizon
    if claims > settings.max_expected_claims:
        raise LimitError(
            ("horizon",),
            f"gives {claims:.6g} expected claims per path (claim_rate x horizon); at most "
            f"{settings.max_expected_claims:g} are allowed (server limit max_expected_claims)",
        )


def _ruin_call(body: RuinRequest, settings: Settings) -> EngineCall:
    process = translate.ruin_process(body.process)
    _check_path_claims(process, body.horizon, settings)
    # The engine sums ladder heights as a one-line portfolio (Pollaczek-Khinchine) and calls
    # request-wide trouble "portfolio": for the caller both are the process.
    return EngineCall(core.ruin_probability, (process, body.capital),
                      {"horizon": body.horizon, "target_probability": body.target_probability,
                       "method": body.method},
                      locate=_renamed("portfolio", "process"), subject=process)


RUIN: Resource[RuinRequest, RuinResponse] = Resource(
    name="ruin", request=RuinRequest, response=RuinResponse,
    check=lambda body, s: _points(s, ("capital", body.capital)),
    translate=_ruin_call,
    respond=lambda _, result, call, notes: translate.ruin_response(result, call.subject,
                                                                   warnings=notes),
    samples=translate.ruin_samples,
)


# --- fit ------------------------------------------------------------------------------------


def _fit_call(body: FitRequest, settings: Settings) -> EngineCall:
    # The bootstrap stops at the server's time limit, inside the wall-time backstop.
    return EngineCall(fit_claims, (body.claims,), {
        "time_limit_s": settings.time_limit_s,
        "reporting_threshold": body.reporting_threshold, "censored_at": body.censored_at,
        "families": body.families, "tail_threshold": body.tail_threshold,
        "counts": body.counts, "exposures": body.exposures,
        "replicates": body.bootstrap.replicates, "max_claims": body.bootstrap.max_claims,
    }, locate=_renamed("portfolio", "claims"))


FIT: Resource[FitRequest, FitResponse] = Resource(
    name="fit", request=FitRequest, response=FitResponse,
    check=lambda _, __: None,  # the schema bounds the data; a fit has no grid of points
    translate=_fit_call,
    respond=lambda _, report, __, ___: fit_translate.fit_response(report),
    samples=lambda _: 0,  # a fit draws no portfolio samples
    precision=False,
)


KINDS: dict[str, Resource[Any, Any]] = {
    resource.name: resource for resource in (EXCEEDANCE, RISK_MEASURES, LAYERS, RUIN, FIT)
}
