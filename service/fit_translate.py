"""Fit reports of ``core.fitting`` -> /v1/fit responses, with each law as the ready JSON of a
portfolio line (validated against the line schema, so what we hand out is what we accept)."""

from __future__ import annotations

import math
from typing import Any

from pydantic import TypeAdapter, ValidationError

import core
from core.fitting.api import FamilyFit, FitReport
from core.fitting.counts_fit import CountReport, count_law
from core.fitting.results import CountFit, Fit
from core.fitting.tail import TailPoint
from service.schemas.common import ClaimCount, Severity
from service.schemas.fit import (
    CountFitOut,
    DispersionOut,
    FitResponse,
    QQPointOut,
    SeverityFitOut,
    TailOut,
    TailPointOut,
    TestOut,
    TestsOut,
    UncertaintyOut,
)
from service.translate import finite_or_none

_SEVERITY: TypeAdapter[Any] = TypeAdapter(Severity)
_COUNT: TypeAdapter[Any] = TypeAdapter(ClaimCount)
DEFAULT_DRAWS = 100


def severity_json(fit: Fit, tail_threshold: float | None) -> dict[str, Any]:
    p = fit.parameters
    if fit.family.startswith("spliced_"):
        body = fit.family.removeprefix("spliced_")
        body_params = {k.removeprefix("body_"): v for k, v in p.items() if k.startswith("body_")
                       and k != "body_weight"}
        return {"family": "spliced", "threshold": tail_threshold,
                "body_weight": p["body_weight"], "body": {"family": body, **body_params},
                "tail": {"xi": p["tail_xi"], "scale": p["tail_scale"]}}
    return {"family": fit.family, **p}


def _checked(adapter: TypeAdapter[Any], value: dict[str, Any], what: str,
             notes: list[str]) -> dict[str, Any] | None:
    try:
        adapter.validate_python(value, strict=True)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(x) for x in first.get("loc", ()))
        notes.append(f"the fitted {what} is outside what a portfolio line accepts ({where}: "
                     f"{first.get('msg', '')}); no ready JSON")
        return None
    return value


def _matrix(cov: Any) -> list[list[float]] | None:
    if cov is None or not all(math.isfinite(float(v)) for v in cov.ravel()):
        return None
    return [[float(v) for v in row] for row in cov]


def _tests(ff: FamilyFit) -> TestsOut:
    t = ff.tests
    return TestsOut(**{k: TestOut(statistic=t[k].statistic, p_value=t[k].p_value)
                       for k in ("ks", "cvm", "ad")}, replicates=t["ks"].replicates)


def severity_fit(ff: FamilyFit) -> SeverityFitOut:
    fit = ff.fit
    notes = list(ff.notes)
    sev = _checked(_SEVERITY, severity_json(fit, ff.tail_threshold), "severity", notes)
    cov = _matrix(fit.covariance)
    return SeverityFitOut(
        family=fit.family, parameters=fit.parameters,
        std_errors={k: finite_or_none(v) for k, v in fit.std_errors.items()},
        covariance=cov, log_likelihood=fit.log_likelihood, aic=fit.aic, bic=fit.bic,
        tests=_tests(ff), qq=[QQPointOut(empirical=a, fitted=b) for a, b in ff.qq
                              if math.isfinite(b)],
        severity=sev,
        parameter_uncertainty=None if cov is None or sev is None else UncertaintyOut(
            covariance=cov, draws=DEFAULT_DRAWS),
        tail_threshold=ff.tail_threshold, notes=notes)


def _points(points: list[TailPoint]) -> list[TailPointOut]:
    return [TailPointOut(threshold=p.threshold, exceedances=p.exceedances, value=p.value,
                         ci_low=finite_or_none(p.ci_low), ci_high=finite_or_none(p.ci_high))
            for p in points if math.isfinite(p.value)]


def _count_fit(fit: CountFit, exposure: float, warnings: list[str]) -> CountFitOut:
    k = len(fit.names)
    count = {"kind": fit.family, **count_law(fit, exposure)}
    checked = _checked(_COUNT, count, f"{fit.family} count", warnings)
    cov = _matrix(fit.covariance)
    return CountFitOut(
        family=fit.family,
        parameters={n: float(v) for n, v in zip(fit.names, fit.theta, strict=True)},
        std_errors={n: (None if cov is None else math.sqrt(cov[i][i]))
                    for i, n in enumerate(fit.names)},
        covariance=cov, log_likelihood=fit.log_likelihood,
        aic=2 * k - 2 * fit.log_likelihood, bic=k * math.log(fit.n) - 2 * fit.log_likelihood,
        count=checked if checked is not None else count)


def _counts(report: CountReport | None, warnings: list[str]) -> tuple[list[CountFitOut],
                                                                      DispersionOut | None]:
    if report is None:
        return [], None
    warnings.extend(report.notes)
    fits = [_count_fit(report.poisson, report.exposure, warnings)]
    if report.negative_binomial is not None:
        fits.append(_count_fit(report.negative_binomial, report.exposure, warnings))
    return fits, DispersionOut(statistic=report.dispersion_statistic, df=report.dispersion_df,
                               p_value=report.dispersion_p_value)


def fit_response(report: FitReport) -> FitResponse:
    warnings = list(report.warnings)
    fits = sorted((severity_fit(ff) for ff in report.fits), key=lambda f: f.aic)
    count_fits, dispersion = _counts(report.counts, warnings)
    t = report.tail
    return FitResponse(
        engine_version=core.ENGINE_VERSION, seed=report.seed,
        elapsed_s=finite_or_none(report.elapsed_s), claims=report.n,
        censored=report.censored, warnings=warnings, fits=fits,
        tail=TailOut(mean_excess=_points(t.mean_excess), gpd_shape=_points(t.gpd_shape),
                     hill=_points(t.hill), hill_k=t.hill_k, hill_xi=finite_or_none(t.hill_xi),
                     hill_ci_low=None if t.hill_ci is None else finite_or_none(t.hill_ci[0]),
                     hill_ci_high=None if t.hill_ci is None else finite_or_none(t.hill_ci[1]),
                     notes=t.notes),
        count_fits=count_fits, dispersion=dispersion)
