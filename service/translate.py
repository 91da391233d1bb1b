"""Request schemas -> core objects, and core results -> response schemas. No maths here.

Core errors raised while building an object are re-raised with the object's path in the
request prefixed to the parameter, so the 422 points at the field the caller wrote.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np

import core
from core.credit import CreditModel
from core.dependence.copula import Copula
from core.errors import MethodError, ParameterError, TailgaugeError
from core.fitting.spliced import Spliced
from core.measures import Interval, Layer, LayerEstimate, MeasureEstimate, TailResult
from core.results import (
    CapitalForTarget,
    Diagnostics,
    ExceedanceEstimate,
    ExceedanceResult,
    RuinEstimate,
    RuinResult,
)
from service import credit_translate
from service.schemas.common import ComputationOut, DiagnosticsOut, LineSpec, PortfolioSpec
from service.schemas.credit import ContributionOut
from service.schemas.exceedance import ExceedanceEstimateOut, ExceedanceResponse
from service.schemas.layers import LayerOut, LayerSpec, LayersResponse
from service.schemas.risk_measures import (
    CurvePointOut,
    LossReturnPeriodOut,
    MeasureOut,
    RiskMeasuresResponse,
)
from service.schemas.ruin import CapitalForTargetOut, ProcessSpec, RuinEstimateOut, RuinResponse

_SEVERITIES: dict[str, Callable[..., Any]] = {
    "lognormal": core.Lognormal,
    "pareto": core.Pareto,
    "weibull": core.Weibull,
    "gamma": core.Gamma,
    "exponential": core.Exponential,
    "normal": core.Normal,
    "generalized_pareto": core.GeneralizedPareto,
}


def _spliced(*, threshold: float, body_weight: float, body: dict[str, Any],
             tail: dict[str, Any]) -> Spliced:
    parts = dict(body)
    family = parts.pop("family")
    with located("body"):
        body_law = _SEVERITIES[family](**parts)
    with located("tail"):
        tail_law = core.GeneralizedPareto(**tail)
    return Spliced(body=body_law, threshold=threshold, body_weight=body_weight,
                   tail_law=tail_law)


_SEVERITIES["spliced"] = _spliced
_COUNTS: dict[str, Callable[..., Any]] = {
    "fixed": core.Fixed,
    "poisson": core.Poisson,
    "negative_binomial": core.NegativeBinomial,
    "binomial": core.Binomial,
}


@contextmanager
def located(*path: str | int) -> Iterator[None]:
    """Prefix ``path`` to the location of any core error raised inside the block."""
    try:
        yield
    except TailgaugeError as exc:
        raise type(exc)((*path, *exc.loc), exc.message) from exc


def engine_error_path(exc: TailgaugeError) -> TailgaugeError:
    """Errors from an engine call name portfolio parts relative to the portfolio."""
    if exc.loc[:1] == ("lines",):
        return type(exc)(("portfolio", *exc.loc), exc.message)
    return exc


def renamed(exc: TailgaugeError, engine_name: str, request_name: str) -> TailgaugeError:
    """An engine error about its own list of points (``engine_name``, index included) pointed
    at the request field those points come from; other errors are kept."""
    if exc.loc[:1] == (engine_name,):
        return type(exc)((request_name,), exc.message)
    return exc


def _line(spec: LineSpec, *path: str | int) -> core.Line:
    with located(*path, "count"):
        count = _COUNTS[spec.count.kind](**spec.count.model_dump(exclude={"kind"}))
    with located(*path, "severity"):
        severity = _SEVERITIES[spec.severity.family](**spec.severity.model_dump(exclude={"family"}))
    with located(*path):
        return core.Line(
            count=count,
            severity=severity,
            retention=spec.retention,
            limit=spec.limit,
            label=spec.label,
        )


def portfolio(spec: PortfolioSpec) -> core.Portfolio | CreditModel:
    if credit_translate.has_obligors(spec):
        return credit_translate.credit_model(
            spec, lambda line, i: _line(line, "portfolio", "lines", i))
    for i, line in enumerate(spec.lines):
        if isinstance(line, LineSpec) and line.factor_loadings is not None:
            raise ParameterError(("portfolio", "lines", i, "factor_loadings"),
                                 "loadings on portfolio.factors apply to claim lines in a book "
                                 "with lines of obligors; a claim portfolio couples its lines "
                                 "with portfolio.dependence.correlation")
    lines = [_line(line, "portfolio", "lines", i) for i, line in enumerate(spec.lines)]
    dep = None
    if spec.dependence is not None:
        # The copula's errors already name portfolio.dependence.<field>[.row.column].
        from core.dependence.copula import check_correlation

        d = spec.dependence
        if d.correlation is None:
            raise ParameterError(("portfolio", "dependence", "correlation"),
                                 "is required for claim lines: one row and column per line")
        check_correlation(d.correlation, size=len(lines))
        dep = Copula(kind=d.copula, correlation=np.asarray(d.correlation, dtype=float),
                     df=d.df)
    with located("portfolio"):
        return core.Portfolio(lines=lines, dependence=dep)


def layers(specs: list[LayerSpec]) -> list[Layer]:
    out = []
    for i, spec in enumerate(specs):
        with located("layers", i):
            out.append(Layer(attachment=spec.attachment, limit=spec.limit))
    return out


def check_finite_means(model: core.Portfolio | CreditModel, figure: str) -> None:
    """Refuse a line whose paid claims have an infinite mean (e.g. Pareto alpha <= 1 with no
    per-claim limit) when ``figure`` needs E[S]-type integrals to exist."""
    if isinstance(model, CreditModel):
        return  # a credit loss is bounded by the sum of the exposures
    for k, line in enumerate(model.lines):
        if line.paid_count.mean > 0 and not math.isfinite(line.paid_severity.mean):
            raise MethodError(
                ("portfolio", "lines", k, "severity"),
                f"has an infinite mean claim, so {figure} does not exist; give the line a "
                "per-claim limit, or use a lighter tail (e.g. Pareto alpha > 1)",
            )


# --- results -> responses -------------------------------------------------------------------


def finite_or_none(value: float | None) -> float | None:
    """JSON has no NaN or Infinity: a non-finite engine figure is reported as null."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def diagnostics(d: Diagnostics) -> DiagnosticsOut:
    return DiagnosticsOut(
        pareto_k=finite_or_none(d.pareto_k),
        effective_samples=finite_or_none(d.effective_samples),
        largest_share=finite_or_none(d.largest_share),
        batch_ratio=finite_or_none(d.batch_ratio),
        reliable=bool(d.reliable),
        reason=str(d.reason),
        exact=bool(d.exact),
    )


def _estimate(e: ExceedanceEstimate) -> ExceedanceEstimateOut:
    return ExceedanceEstimateOut(
        threshold=float(e.threshold),
        probability=finite_or_none(e.value),
        std_error=finite_or_none(e.std_error),
        relative_error=finite_or_none(e.relative_error),
        ci_low=finite_or_none(e.ci_low),
        ci_high=finite_or_none(e.ci_high),
        samples=int(e.samples),
        hits=int(e.hits),
        diagnostics=diagnostics(e.diagnostics),
    )


def _nulled_figures(response: ExceedanceResponse) -> bool:
    return any(
        v is None
        for e in response.estimates
        for v in (e.probability, e.ci_low, e.ci_high)
    )


def exceedance_response(result: ExceedanceResult, *, warnings: list[str]) -> ExceedanceResponse:
    response = ExceedanceResponse(
        engine_version=core.ENGINE_VERSION,
        method=result.method,
        method_reason=result.method_reason,
        seed=int(result.seed),
        elapsed_s=finite_or_none(result.elapsed_s),
        stopped_by=result.stopped_by,
        mean=finite_or_none(result.mean),
        std_dev=finite_or_none(result.std_dev),
        warnings=[*result.warnings, *warnings],
        estimates=[_estimate(e) for e in result.estimates],
    )
    if _nulled_figures(response):
        response.warnings.append(
            "the engine produced a non-finite probability or interval end; it is reported "
            "as null"
        )
    return response


def samples_behind(result: ExceedanceResult) -> int:
    """Samples behind the reported estimates: the largest sample set (pilots excluded)."""
    return max((int(e.samples) for e in result.estimates), default=0)


# --- risk measures and layers ---------------------------------------------------------------

def _nothing_observed(p: Interval, samples: int) -> bool:
    """A sampled probability of 0 with a zero-width interval: no sample reached the point.
    (The deterministic method reports samples = 0; its 0 is a rigorous bound.)"""
    # The core marks it with std_error None (and its own one-sided bound).
    return samples > 0 and p.value <= 0.0 and (p.std_error is None or p.ci_high <= 0.0)


def _probability(p: Interval, samples: int) -> tuple[float | None, float | None, float | None]:
    """(value, ci_low, ci_high) of a probability, clipped to [0, 1]; nothing observed gives
    0 with the core's one-sided upper bound (core.intervals) rather than "0 +- 0"."""
    if _nothing_observed(p, samples):
        return 0.0, 0.0, min(1.0, p.ci_high)
    return (
        finite_or_none(min(p.value, 1.0)),
        finite_or_none(max(p.ci_low, 0.0)),
        finite_or_none(min(p.ci_high, 1.0)),
    )


def _reciprocal(p: float | None) -> float | None:
    return finite_or_none(1.0 / p) if p is not None and p > 0.0 else None


def _measure(m: MeasureEstimate) -> MeasureOut:
    return MeasureOut(
        level=float(m.level),
        var=finite_or_none(m.var.value),
        var_ci_low=finite_or_none(m.var.ci_low),
        var_ci_high=finite_or_none(m.var.ci_high),
        tvar=finite_or_none(m.tvar.value),
        tvar_ci_low=finite_or_none(m.tvar.ci_low),
        tvar_ci_high=finite_or_none(m.tvar.ci_high),
        tvar_std_error=finite_or_none(m.tvar.std_error),
        diagnostics=diagnostics(m.diagnostics),
        contributions=[ContributionOut(
            label=c.label, tvar_contribution=finite_or_none(c.tvar_contribution),
            ci_low=finite_or_none(c.ci_low), ci_high=finite_or_none(c.ci_high))
            for c in m.contributions],
    )


def _curve_point(period: float, m: MeasureEstimate) -> CurvePointOut:
    return CurvePointOut(
        return_period=float(period),
        probability=1.0 / float(period),
        loss=finite_or_none(m.var.value),
        loss_ci_low=finite_or_none(m.var.ci_low),
        loss_ci_high=finite_or_none(m.var.ci_high),
        diagnostics=diagnostics(m.diagnostics),
    )


def _loss_point(loss: float, p: Interval, samples: int) -> LossReturnPeriodOut:
    value, low, high = _probability(p, samples)
    return LossReturnPeriodOut(
        loss=float(loss),
        probability=value,
        probability_ci_low=low,
        probability_ci_high=high,
        std_error=finite_or_none(p.std_error),
        return_period=_reciprocal(value),
        return_period_ci_low=_reciprocal(high),
        return_period_ci_high=_reciprocal(low),
    )


def _computation(result: TailResult, warnings: list[str]) -> dict[str, Any]:
    return {
        "engine_version": core.ENGINE_VERSION,
        "method": result.method,
        "method_reason": result.method_reason,
        "seed": int(result.seed),
        "elapsed_s": finite_or_none(result.elapsed_s),
        "stopped_by": result.stopped_by,
        "mean": finite_or_none(result.mean),
        "std_dev": finite_or_none(result.std_dev),
        "warnings": [*result.warnings, *warnings],
        "samples": int(result.samples),
    }


def _warn_if_nulled(response: ComputationOut, figures: list[float | None]) -> None:
    if any(v is None for v in figures):
        response.warnings.append(
            "the engine produced a non-finite figure or interval end; it is reported as null"
        )


def risk_measures_response(
    result: TailResult, *, n_levels: int, return_periods: list[float], losses: list[float],
    warnings: list[str],
) -> RiskMeasuresResponse:
    """The first ``n_levels`` measures answer ``levels``; the rest, in order, the return
    periods (VaR at 1 - 1/T), all from the one sample set of ``result``."""
    by_period = result.measures[n_levels:]
    response = RiskMeasuresResponse(
        **_computation(result, warnings),
        measures=[_measure(m) for m in result.measures[:n_levels]],
        curve=[_curve_point(t, m) for t, m in zip(return_periods, by_period, strict=True)],
        loss_return_periods=[
            _loss_point(x, p, result.samples)
            for x, p in zip(losses, result.loss_exceedance, strict=True)
        ],
    )
    _warn_if_nulled(response, [
        *(v for m in response.measures for v in (m.var, m.var_ci_low, m.var_ci_high, m.tvar,
                                                 m.tvar_ci_low, m.tvar_ci_high)),
        *(v for c in response.curve for v in (c.loss, c.loss_ci_low, c.loss_ci_high)),
        *(v for x in response.loss_return_periods
          for v in (x.probability, x.probability_ci_low, x.probability_ci_high)),
    ])
    return response


def _layer_name(i: int, e: LayerEstimate) -> str:
    width = "unlimited" if e.limit is None else f"{e.limit:g}"
    return f"layers[{i}] ({width} xs {e.attachment:g})"


def _layer(i: int, e: LayerEstimate, samples: int, warnings: list[str]) -> LayerOut:
    attach = _probability(e.probability_attach, samples)
    exhaust = (None, None, None) if e.probability_exhaust is None else _probability(
        e.probability_exhaust, samples)
    loss_low = finite_or_none(e.expected_loss.ci_low)
    loss_high = finite_or_none(e.expected_loss.ci_high)
    if _nothing_observed(e.probability_attach, samples):
        # Nothing reached the layer: its loss is at most limit * P(S > a) <= limit * bound.
        warnings.append(f"{_layer_name(i, e)}: no sample reached the attachment; the "
                        "figures are 0 with one-sided upper bounds")
        loss_low = 0.0  # the core's loss bound is already limit * the no-hit bound
    elif not e.diagnostics.reliable:
        warnings.append(f"{_layer_name(i, e)}: flagged unreliable: {e.diagnostics.reason}")
    return LayerOut(
        attachment=float(e.attachment),
        limit=None if e.limit is None else float(e.limit),
        expected_loss=finite_or_none(e.expected_loss.value),
        expected_loss_ci_low=loss_low,
        expected_loss_ci_high=loss_high,
        expected_loss_std_error=finite_or_none(e.expected_loss.std_error),
        probability_attach=attach[0],
        probability_attach_ci_low=attach[1],
        probability_attach_ci_high=attach[2],
        probability_exhaust=exhaust[0],
        probability_exhaust_ci_low=exhaust[1],
        probability_exhaust_ci_high=exhaust[2],
        diagnostics=diagnostics(e.diagnostics),
    )


def layers_response(result: TailResult, *, warnings: list[str]) -> LayersResponse:
    notes: list[str] = []
    layers = [_layer(i, e, result.samples, notes) for i, e in enumerate(result.layers)]
    response = LayersResponse(**_computation(result, [*warnings, *notes]), layers=layers)
    _warn_if_nulled(response, [
        v for ly in layers
        for v in (ly.expected_loss, ly.expected_loss_ci_low, ly.probability_attach,
                  ly.probability_attach_ci_low, ly.probability_attach_ci_high)
    ])
    return response


# --- ruin -------------------------------------------------------------------------------------


def ruin_process(spec: ProcessSpec) -> core.SurplusProcess:
    """The surplus process; a claim law with an infinite mean is refused at its severity."""
    with located("process", "severity"):
        severity = _SEVERITIES[spec.severity.family](**spec.severity.model_dump(exclude={"family"}))
    if spec.retention is None and not math.isfinite(severity.mean):
        # Without a finite mean claim neither the loading's premium nor the net profit
        # condition means anything.
        raise ParameterError(
            ("process", "severity"),
            "has an infinite mean claim, but a ruin process needs a finite mean claim; give a "
            "retention (the insurer then pays min(X, retention)), or a lighter tail (e.g. "
            "Pareto alpha > 1)",
        )
    with located("process"):
        return core.SurplusProcess(
            claim_rate=spec.claim_rate,
            severity=severity,
            loading=spec.loading,
            premium_rate=spec.premium_rate,
            retention=spec.retention,
        )


def _ruin_estimate(e: RuinEstimate) -> RuinEstimateOut:
    return RuinEstimateOut(
        capital=float(e.capital),
        probability=finite_or_none(e.value),
        std_error=finite_or_none(e.std_error),
        relative_error=finite_or_none(e.relative_error),
        ci_low=finite_or_none(e.ci_low),
        ci_high=finite_or_none(e.ci_high),
        samples=int(e.samples),
        hits=int(e.hits),
        diagnostics=diagnostics(e.diagnostics),
        approximation=finite_or_none(e.approximation),
    )


def _capital_for_target(c: CapitalForTarget | None) -> CapitalForTargetOut | None:
    if c is None:
        return None
    return CapitalForTargetOut(
        target=float(c.target),
        capital=finite_or_none(c.capital),
        ci_low=finite_or_none(c.ci_low),
        ci_high=finite_or_none(c.ci_high),
    )


def ruin_response(
    result: RuinResult, process: core.SurplusProcess, *, warnings: list[str]
) -> RuinResponse:
    response = RuinResponse(
        engine_version=core.ENGINE_VERSION,
        method=result.method,
        method_reason=result.method_reason,
        seed=int(result.seed),
        elapsed_s=finite_or_none(result.elapsed_s),
        stopped_by=result.stopped_by,
        warnings=[*result.warnings, *warnings],
        premium_rate=finite_or_none(result.premium_rate),
        mean_claim=finite_or_none(process.mean_claim),
        horizon=finite_or_none(result.horizon),
        adjustment_coefficient=finite_or_none(result.adjustment_coefficient),
        lundberg_constant=finite_or_none(result.lundberg_constant),
        estimates=[_ruin_estimate(e) for e in result.estimates],
        capital_for_target=_capital_for_target(result.capital_for_target),
    )
    if any(v is None for e in response.estimates for v in (e.probability, e.ci_low, e.ci_high)):
        response.warnings.append(
            "the engine produced a non-finite figure or interval end; it is reported as null"
        )
    return response


def ruin_samples(result: RuinResult) -> int:
    """Paths behind the reported estimates: the largest sample set (capital search excluded)."""
    return max((int(e.samples) for e in result.estimates), default=0)
