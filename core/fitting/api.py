"""``fit_claims``: every requested family fitted to one set of claims, with its goodness-of-fit
tests and QQ points, the tail diagnostics and, given counts per period, the count fits."""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from core.errors import ParameterError, TailgaugeError
from core.exceedance import check_seed
from core.fitting import severity_fit, spliced
from core.fitting.counts_fit import CountReport, fit_counts
from core.fitting.data import ClaimData, Floats, claim_data
from core.fitting.families import FAMILIES
from core.fitting.gof import bootstrap_tests
from core.fitting.model import Model
from core.fitting.results import Fit, TestResult
from core.fitting.tail import TailDiagnostics, tail_diagnostics

SPLICED = tuple(f"spliced_{b}" for b in spliced.BODIES)
ALL_FAMILIES = (*FAMILIES, *SPLICED)
# Stable spawn keys: a family's bootstrap streams do not depend on which others were asked.
FAMILY_KEY = {name: i for i, name in enumerate(ALL_FAMILIES)}
DEFAULT_REPLICATES = 49
DEFAULT_MAX_CLAIMS = 500
QQ_POINTS = 100


@dataclass(frozen=True, kw_only=True)
class FamilyFit:
    fit: Fit
    tests: dict[str, TestResult]
    qq: list[tuple[float, float]]  # (empirical, fitted) quantile pairs
    tail_threshold: float | None = None  # the splice point of a spliced law
    notes: list[str] = field(default_factory=list)


@dataclass(frozen=True, kw_only=True)
class FitReport:
    seed: int
    elapsed_s: float
    n: int
    censored: int
    fits: list[FamilyFit]
    tail: TailDiagnostics
    counts: CountReport | None
    warnings: list[str] = field(default_factory=list)


def qq_points(fit: Fit, data: ClaimData) -> list[tuple[float, float]]:
    """Exact claims against the fitted conditional quantiles at their Kaplan-Meier plotting
    positions (the midpoints of each jump: (i - 0.5) / n without censoring)."""
    order = np.argsort(data.x, kind="stable")
    x, c = data.x[order], data.censored[order]
    at_risk = np.arange(x.size, 0, -1, dtype=float)
    surv = np.cumprod(np.where(c, 1.0, 1.0 - 1.0 / at_risk))
    before = np.concatenate([[1.0], surv[:-1]])
    p_surv = 0.5 * (before + surv)[~c]
    xs = x[~c]
    pick = np.unique(np.linspace(0, xs.size - 1, min(QQ_POINTS, xs.size)).astype(int))
    law = fit.severity
    log_sd = 0.0
    if data.threshold is not None and data.threshold > law.support_min:
        log_sd = float(law.logsf(data.threshold))
    fitted = np.asarray(law.isf_log(log_sd + np.log(p_surv[pick])), dtype=float)
    return [(float(a), float(b)) for a, b in zip(xs[pick], fitted, strict=True)]


def _models(data: ClaimData, families: Sequence[str] | None,
            tail_threshold: float | None) -> tuple[list[tuple[Model, float | None]], list[str]]:
    asked = families is not None
    names = list(families) if families is not None else [
        f for f in ALL_FAMILIES if f != "normal" or bool(np.any(data.x <= 0))]
    if asked and not names:
        raise ParameterError("families", "must name at least one family")
    notes: list[str] = []
    out: list[tuple[Model, float | None]] = []
    for j, name in enumerate(names):
        if name not in ALL_FAMILIES:
            raise ParameterError(f"families[{j}]", f"unknown family {name!r}; known: "
                                 f"{', '.join(ALL_FAMILIES)}")
        if name in SPLICED:
            u = tail_threshold if tail_threshold is not None else spliced.default_threshold(
                data.x)
            model, where = spliced.model(name.removeprefix("spliced_"), u), u
        else:
            model, where = severity_fit.model(name), None
        if not asked:
            try:
                model.check(data)
            except TailgaugeError as exc:
                notes.append(f"{name} not fitted: {exc.message}")
                continue
        out.append((model, where))
    if not out:
        raise ParameterError("claims", "no family can be fitted to these claims: "
                             + "; ".join(notes))
    return out, notes


def fit_claims(
    claims: Sequence[float], *, reporting_threshold: float | None = None,
    censored_at: Sequence[float | None] | None = None, families: Sequence[str] | None = None,
    tail_threshold: float | None = None, counts: Sequence[int] | None = None,
    exposures: Sequence[float] | None = None, replicates: int = DEFAULT_REPLICATES,
    max_claims: int = DEFAULT_MAX_CLAIMS, seed: int | None = None,
    time_limit_s: float | None = None,
) -> FitReport:
    """Fit ``families`` (absent: every one that applies) to the claims; see the package
    modules for the methods. ``time_limit_s`` bounds the bootstrap: replicates stop there
    (each family's p-values rest on the replicates done, and a warning says so); the fits
    themselves always run."""
    start = time.monotonic()
    seed = check_seed(seed)
    if time_limit_s is not None and not (
            isinstance(time_limit_s, int | float) and time_limit_s > 0
            and math.isfinite(time_limit_s)):
        raise ParameterError("time_limit_s", f"must be a finite number > 0, got {time_limit_s!r}")
    deadline = None if time_limit_s is None else start + float(time_limit_s)
    if not (isinstance(replicates, int) and replicates >= 1):
        raise ParameterError("replicates", f"must be an integer >= 1, got {replicates!r}")
    if not (isinstance(max_claims, int) and max_claims >= 20):
        raise ParameterError("max_claims", f"must be an integer >= 20, got {max_claims!r}")
    data = claim_data(claims, reporting_threshold=reporting_threshold, censored_at=censored_at)
    if exposures is not None and counts is None:
        raise ParameterError("exposures", "need counts: one exposure per period of counts")
    count_report = fit_counts(counts, exposures) if counts is not None else None
    models, warnings = _models(data, families, tail_threshold)
    fitted = [(model, where, model.fit(data)) for model, where in models]
    fits = []
    for j, (model, where, fit) in enumerate(fitted):
        # The families share the time left equally, so a slow first one does not leave the
        # others without replicates.
        share = None if deadline is None else (
            time.monotonic() + (deadline - time.monotonic()) / (len(fitted) - j))
        fits.append(_tested(model, where, fit, data, replicates, max_claims, seed, share))
    if any(n.startswith("bootstrap stopped at the time limit") for f in fits for n in f.notes):
        warnings.append(f"the goodness-of-fit bootstrap stopped at the time limit of "
                        f"{time_limit_s:g} s: the p-values rest on fewer replicates than "
                        "asked (each fit's tests.replicates says how many)")
    return FitReport(seed=seed, elapsed_s=time.monotonic() - start, n=data.n,
                     censored=int(data.censored.sum()), fits=fits,
                     tail=tail_diagnostics(data), counts=count_report, warnings=warnings)


def _tested(model: Model, where: float | None, fit: Fit, data: ClaimData, replicates: int,
            max_claims: int, seed: int, deadline: float | None) -> FamilyFit:
    tests, notes = bootstrap_tests(fit.severity, data, model.refitter(fit),
                                   replicates=replicates, max_claims=max_claims, seed=seed,
                                   key=FAMILY_KEY[model.name], deadline=deadline)
    if data.n > max_claims:
        notes.append(f"bootstrap replicates have {max_claims} claims (of {data.n}); the "
                     "p-values compare n-scaled statistics")
    return FamilyFit(fit=fit, tests=tests, qq=qq_points(fit, data), tail_threshold=where,
                     notes=[*fit.notes, *notes])


def natural_parameters(theta: Floats) -> list[float]:
    return [float(v) if math.isfinite(float(v)) else math.nan for v in theta]
