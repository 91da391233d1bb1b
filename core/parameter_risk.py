"""Parameter risk in the figures: a nested simulation over draws of uncertain severity
parameters, built as an outer layer over the public engine entry points.

A line's parameters theta-hat come with a covariance (the inverse observed information of a
fit). Draw j takes theta_j from the normal approximation of the estimator on the fitter's free
scale (log for positive parameters, logit for a weight: Cov(z) = J^-1 Cov(theta) J^-1, the
delta method), so every draw is a valid law. The figure is recomputed under each draw with
the request's own seed (common random numbers: the draws differ by their parameters, not by
their sampling noise), and

- the parameter interval is the 2.5% .. 97.5% range of the figure over the draws (the
  percentile interval of the approximate sampling distribution of the plug-in figure);
- the combined interval adds the parameter and sampling half-widths in quadrature on each
  side of the central figure (independent errors);
- ``dominant`` names the part with the wider half-widths.

Draw j of line k comes from SeedSequence(seed, spawn_key=(PARAMETER_DRAWS, k)), all draws of
a line from one stream, so the same seed gives the same draws.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from core.errors import ParameterError, TailgaugeError
from core.fitting.lookup import model_of
from core.portfolio import Portfolio
from core.precision import past

Floats = NDArray[np.float64]
PARAMETER_DRAWS = 102  # spawn-key purpose of the parameter draws
MIN_DRAWS = 20


@dataclass(frozen=True, kw_only=True)
class ParameterUncertainty:
    covariance: Sequence[Sequence[float]]
    draws: int = 100


@dataclass(frozen=True, kw_only=True)
class Figure:
    """A figure with its sampling interval, as the engine reported it."""

    value: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True, kw_only=True)
class ParameterInterval:
    value: float
    ci_low: float  # sampling and parameter uncertainty together
    ci_high: float
    parameter_low: float  # the figure's 2.5% .. 97.5% range over the parameter draws
    parameter_high: float
    parameter_std_dev: float
    sampling_low: float
    sampling_high: float
    dominant: Literal["parameter", "sampling"]
    draws: int


@dataclass(frozen=True, kw_only=True)
class NestedResult:
    intervals: list[ParameterInterval | None]
    draws: int
    skipped: int
    warnings: list[str] = field(default_factory=list)


def _free_draws(cov_in: Sequence[Sequence[float]], theta: Floats, jac: Floats, z_hat: Floats,
                n: int, rng: np.random.Generator, where: str) -> Floats:
    cov = np.asarray(cov_in, dtype=float)
    k = theta.size
    if cov.shape != (k, k):
        raise ParameterError(where, f"must be a {k} x {k} matrix (the severity has {k} "
                             f"parameters), got shape {list(cov.shape)}")
    if not np.all(np.isfinite(cov)):
        raise ParameterError(where, "must hold finite numbers")
    scale = max(float(np.max(np.abs(cov))), 1e-300)
    if float(np.max(np.abs(cov - cov.T))) > 1e-8 * scale:
        raise ParameterError(where, "must be symmetric")
    cov_z = cov / jac[:, None] / jac[None, :]
    values, vectors = np.linalg.eigh(0.5 * (cov_z + cov_z.T))
    if float(values.min()) < -1e-8 * max(float(values.max()), 1e-300):
        raise ParameterError(where, "must be positive semi-definite")
    root = vectors * np.sqrt(np.maximum(values, 0.0))
    return np.asarray(z_hat + rng.standard_normal((n, k)) @ root.T, dtype=np.float64)


def draw_portfolios(portfolio: Portfolio, uncertainty: Mapping[int, ParameterUncertainty],
                    seed: int) -> tuple[list[Portfolio], int]:
    """Portfolios with the uncertain lines' severities redrawn; also how many draws gave an
    invalid line and were skipped."""
    n = max(u.draws for u in uncertainty.values())
    if n < MIN_DRAWS:
        raise ParameterError("parameter_uncertainty.draws", f"must be >= {MIN_DRAWS}")
    lines = list(portfolio.lines)
    per_line: dict[int, list[Any]] = {}
    for k, unc in sorted(uncertainty.items()):
        model, theta = model_of(lines[k].severity)
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(PARAMETER_DRAWS, k)))
        z = _free_draws(unc.covariance, theta, model.jacobian(theta), model.free(theta), n, rng,
                        f"lines[{k}].parameter_uncertainty.covariance")
        per_line[k] = [z[j] for j in range(n)]
        per_line[k].insert(0, model)
    out: list[Portfolio] = []
    skipped = 0
    for j in range(n):
        try:
            new = list(lines)
            for k, items in per_line.items():
                model = items[0]
                new[k] = replace(lines[k], severity=model.build(items[1 + j]))
            out.append(Portfolio(lines=new))
        except (TailgaugeError, ArithmeticError, ValueError):
            skipped += 1  # e.g. a retention beyond a drawn law's bounded support
    return out, skipped


def _quantile(values: Floats, q: float) -> float:
    return float(np.quantile(values, q))


def combine(central: Figure, spread: Floats) -> ParameterInterval:
    lo_p, hi_p = _quantile(spread, 0.025), _quantile(spread, 0.975)
    v = central.value
    down_p, up_p = max(v - lo_p, 0.0), max(hi_p - v, 0.0)
    down_s, up_s = max(v - central.ci_low, 0.0), max(central.ci_high - v, 0.0)
    return ParameterInterval(
        value=v, ci_low=v - math.hypot(down_p, down_s), ci_high=v + math.hypot(up_p, up_s),
        parameter_low=min(lo_p, v), parameter_high=max(hi_p, v),
        parameter_std_dev=float(np.std(spread, ddof=1)), sampling_low=central.ci_low,
        sampling_high=central.ci_high,
        dominant="parameter" if down_p + up_p > down_s + up_s else "sampling",
        draws=int(spread.size))


def nested(run: Callable[[Portfolio], Any], extract: Callable[[Any], list[Figure | None]],
           central: Any, portfolio: Portfolio, uncertainty: Mapping[int, ParameterUncertainty],
           seed: int, deadline: float | None = None) -> NestedResult:
    """Parameter intervals of the figures ``extract(central)``: ``run`` is called on every
    drawn portfolio (with the caller's seed inside ``run``); stops drawing at ``deadline``."""
    figures = extract(central)
    portfolios, skipped = draw_portfolios(portfolio, uncertainty, seed)
    rows: list[list[float]] = []
    warnings: list[str] = []
    for p in portfolios:
        if past(deadline):
            warnings.append(f"the time limit stopped the parameter draws after {len(rows)} "
                            f"of {len(portfolios)}")
            break
        try:
            values = extract(run(p))
        except TailgaugeError:
            skipped += 1
            continue
        rows.append([math.nan if f is None else f.value for f in values])
    if skipped:
        warnings.append(f"{skipped} parameter draws gave a model the engine refused (e.g. a "
                        "retention beyond a drawn law's support) and were left out")
    if len(rows) < MIN_DRAWS:
        warnings.append(f"only {len(rows)} parameter draws finished (at least {MIN_DRAWS} "
                        "are needed): no parameter intervals")
        return NestedResult(intervals=[None] * len(figures), draws=len(rows), skipped=skipped,
                            warnings=warnings)
    table = np.asarray(rows, dtype=float)
    intervals: list[ParameterInterval | None] = []
    for i, f in enumerate(figures):
        col = table[:, i]
        col = col[np.isfinite(col)]
        ok = f is not None and math.isfinite(f.value) and col.size >= MIN_DRAWS
        intervals.append(combine(f, col) if ok and f is not None else None)
    return NestedResult(intervals=intervals, draws=len(rows), skipped=skipped,
                        warnings=warnings)
