"""Request schemas -> core objects, and core results -> response schemas. No maths here.

Core errors raised while building an object are re-raised with the object's path in the
request prefixed to the parameter, so the 422 points at the field the caller wrote.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import core
from core.errors import TailgaugeError
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from service.schemas.common import DiagnosticsOut, LineSpec, PortfolioSpec
from service.schemas.exceedance import ExceedanceEstimateOut, ExceedanceResponse

_SEVERITIES: dict[str, Callable[..., Any]] = {
    "lognormal": core.Lognormal,
    "pareto": core.Pareto,
    "weibull": core.Weibull,
    "gamma": core.Gamma,
    "exponential": core.Exponential,
    "normal": core.Normal,
    "generalized_pareto": core.GeneralizedPareto,
}
_COUNTS: dict[str, Callable[..., Any]] = {
    "fixed": core.Fixed,
    "poisson": core.Poisson,
    "negative_binomial": core.NegativeBinomial,
    "binomial": core.Binomial,
}


@contextmanager
def located(path: str) -> Iterator[None]:
    """Prefix ``path`` to the parameter of any core error raised inside the block."""
    try:
        yield
    except TailgaugeError as exc:
        raise type(exc)(f"{path}.{exc.parameter}", exc.message) from exc


def engine_error_path(exc: TailgaugeError) -> TailgaugeError:
    """Errors from an engine call name portfolio parts relative to the portfolio."""
    if exc.parameter == "lines" or exc.parameter.startswith(("lines.", "lines[")):
        return type(exc)(f"portfolio.{exc.parameter}", exc.message)
    return exc


def _line(spec: LineSpec, path: str) -> core.Line:
    with located(f"{path}.count"):
        count = _COUNTS[spec.count.kind](**spec.count.model_dump(exclude={"kind"}))
    with located(f"{path}.severity"):
        severity = _SEVERITIES[spec.severity.family](**spec.severity.model_dump(exclude={"family"}))
    with located(path):
        return core.Line(
            count=count,
            severity=severity,
            retention=spec.retention,
            limit=spec.limit,
            label=spec.label,
        )


def portfolio(spec: PortfolioSpec) -> core.Portfolio:
    lines = [_line(line, f"portfolio.lines[{i}]") for i, line in enumerate(spec.lines)]
    with located("portfolio"):
        return core.Portfolio(lines=lines)


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
