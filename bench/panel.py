"""The estimator panel: every estimator on a panel of model cases, against deterministic
references (core.recursion's bounds, or a closed form where one exists).

    python -m bench.panel            # the full panel (about ten minutes on 2 shared cores)
    python -m bench.panel --quick    # a tiny budget (the smoke test)

Tables are printed as markdown and written to OUT/panel.md, the numbers to OUT/panel.json and
the plots to OUT/*.png (bench.plots); OUT is bench/out unless --out says otherwise.

Work-normalised variance (WNV) of an estimator is its relative variance per sample times its
seconds per sample, which for a run of n samples is relative_error**2 * seconds. Ratios are
taken between figures measured in the same run. Crude Monte Carlo with no hits has no measured
variance: there the rule of three (P < 3/n at 95%, the bound the engine reports) gives its
relative variance per sample (1 - p)/p > n/3 - 1, so the ratio against crude is a lower bound
(marked >=). Beside it, the ratio against the exact crude variance p (1 - p), p the reference.

Numbers are measurements, not pass/fail checks.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import sys
import time
import tracemalloc
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from functools import partial
from pathlib import Path
from typing import Any

import numpy as np
import scipy
from scipy import optimize, special, stats

from core import (
    Exponential,
    Fixed,
    Gamma,
    LimitError,
    Line,
    Lognormal,
    MethodError,
    NegativeBinomial,
    Pareto,
    Poisson,
    Portfolio,
    Precision,
)
from core.estimators import registry
from core.estimators.estimator import ModelKind
from core.exceedance import exceedance
from core.recursion import exceedance_bounds

OUT = Path(__file__).resolve().parent / "out"
SEED = 1
WIDTH_TARGET = 1e-3  # (upper - lower) / point wanted from a reference


# ------------------------------------------------------------------------ the panel


@dataclass(frozen=True, kw_only=True)
class Level:
    """Where a threshold sits: near tail probability `p`, or `sd` standard deviations above the
    mean."""

    label: str
    p: float | None = None
    sd: float | None = None


def levels(*ps: float) -> tuple[Level, ...]:
    return tuple(Level(label=f"{p:.0e}", p=p) for p in ps)


@dataclass(frozen=True, kw_only=True)
class Case:
    key: str
    label: str
    portfolio: Portfolio
    levels: tuple[Level, ...]
    # closed form of P(S > x) and its source, where the literature has one
    closed_form: Callable[[float], float] | None = None
    source: str = "recursion"


def single(count: Any, severity: Any, limit: float | None = None) -> Portfolio:
    return Portfolio(lines=[Line(count=count, severity=severity, limit=limit)])


def gamma_sum_sf(x: float) -> float:
    # The sum of 20 independent gamma(2, 1) claims is gamma(40, 1) (additivity of the gamma law
    # with a common scale).
    return float(stats.gamma(40.0).sf(x))


def poisson_exponential_sf(x: float, mean: float = 5.0) -> float:
    # Compound Poisson with exponential(1) claims: given N = n >= 1 the sum is Erlang(n, 1),
    # so P(S > x) = sum_n P(N = n) P(Gamma(n, 1) > x), summed in log space.
    n = np.arange(1, int(max(200.0, 4.0 * x + 50.0)))
    terms = stats.poisson(mean).logpmf(n) + stats.gamma(n).logsf(x)
    return float(np.exp(special.logsumexp(terms)))


HARD = (Level(label="1e-03", p=1e-3), Level(label="5 sd", sd=5.0), Level(label="8 sd", sd=8.0))
TAIL = levels(1e-3, 1e-6, 1e-9)

CASES: tuple[Case, ...] = (
    Case(key="lognormal_n10", label="lognormal(0,1), n=10",
         portfolio=single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0)), levels=TAIL),
    Case(key="lognormal_n50", label="lognormal(0,0.5), n=50",
         portfolio=single(Fixed(n=50), Lognormal(mu=0.0, sigma=0.5)), levels=HARD),
    Case(key="lognormal_n100", label="lognormal(0,0.25), n=100",
         portfolio=single(Fixed(n=100), Lognormal(mu=0.0, sigma=0.25)), levels=HARD),
    Case(key="gamma_n20", label="gamma(2,1), n=20",
         portfolio=single(Fixed(n=20), Gamma(shape=2.0, scale=1.0)), levels=TAIL,
         closed_form=gamma_sum_sf, source="gamma(40,1)"),
    Case(key="poisson_lognormal", label="Poisson(5) lognormal(0,1.5)",
         portfolio=single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5)), levels=TAIL),
    Case(key="poisson_exponential", label="Poisson(5) exponential(1)",
         portfolio=single(Poisson(mean=5.0), Exponential(mean=1.0)), levels=TAIL,
         closed_form=poisson_exponential_sf, source="Poisson mixture of Erlang"),
    Case(key="negbin_pareto", label="NB(5, disp 2) Pareto(2.5,1)",
         portfolio=single(NegativeBinomial(mean=5.0, dispersion=2.0),
                          Pareto(alpha=2.5, scale=1.0)), levels=TAIL),
    Case(key="capped_pareto", label="Poisson(5) Pareto(2.5,1) limit 10",
         portfolio=single(Poisson(mean=5.0), Pareto(alpha=2.5, scale=1.0), limit=10.0),
         levels=TAIL),
    Case(key="mixed", label="Poisson(3) lognormal(0,1.5) + Poisson(20) gamma(2,1)",
         portfolio=Portfolio(lines=[
             Line(count=Poisson(mean=3.0), severity=Lognormal(mu=0.0, sigma=1.5)),
             Line(count=Poisson(mean=20.0), severity=Gamma(shape=2.0, scale=1.0))]),
         levels=TAIL),
)


# The Monte Carlo estimators of the registry, then auto (the columns of the tables).
ESTIMATORS = (*(e.name for e in registry.estimators()
                if not e.deterministic and ModelKind.CLAIMS in e.serves), "auto")


def methods_for(portfolio: Portfolio) -> list[str]:
    """The Monte Carlo estimators that apply (each says so itself: conditional needs a line
    without a per-claim limit, tilting a light-tailed portfolio), and auto."""
    return [m for m in ESTIMATORS[:-1] if registry.get(m).applies(portfolio)] + ["auto"]


# ------------------------------------------------------------------------ thresholds


def _recursion_point(portfolio: Portfolio, x: float, cells: int) -> float:
    return exceedance_bounds(portfolio, [x], cells=cells)[0][2]


def _guess(portfolio: Portfolio, p: float) -> float:
    """A start for the search: the larger of the normal approximation and the one-big-claim
    (subexponential) approximation E[N] P(X > x) = p of the line that reaches furthest."""
    normal = portfolio.mean + float(stats.norm.isf(p)) * portfolio.std_dev
    big = max(float(line.paid_severity.isf(min(0.5, p / max(line.paid_count.mean, 1e-12))))
              for line in portfolio.lines)
    return max(normal, big, 1e-9)


def find_threshold(case: Case, p: float, *, cells: int, tolerance: float = 0.1) -> float:
    """A threshold x with P(S > x) within a factor exp(tolerance) of p: the closed form's root
    where there is one, else secant steps on log P against log x with the recursion's point."""
    target = math.log(p)
    if case.closed_form is not None:
        cf = case.closed_form
        lo, hi = case.portfolio.mean, 2.0 * _guess(case.portfolio, p)
        while cf(hi) > p:
            hi *= 2.0
        return float(optimize.brentq(lambda x: math.log(max(cf(x), 1e-300)) - target, lo, hi,
                                     rtol=1e-10))

    def gap(log_x: float) -> float:
        value = _recursion_point(case.portfolio, math.exp(log_x), cells)
        return math.log(max(value, 1e-300)) - target

    x0 = math.log(_guess(case.portfolio, p))
    x1 = x0 + 0.2
    f0, f1 = gap(x0), gap(x1)
    for _ in range(10):
        if abs(f1) <= tolerance:
            break
        slope = (f1 - f0) / (x1 - x0) if x1 != x0 else -1.0
        # P falls with x; a flat or wrong-signed secant means a poor start: step by a factor e
        step = -f1 / slope if slope < 0 else (1.0 if f1 > 0 else -1.0)
        x0, f0 = x1, f1
        x1 = x1 + max(-1.0, min(1.0, step))
        f1 = gap(x1)
    return math.exp(x1)


def thresholds(case: Case, *, cells: int) -> list[float]:
    out = []
    for level in case.levels:
        if level.sd is not None:
            out.append(case.portfolio.mean + level.sd * case.portfolio.std_dev)
        else:
            assert level.p is not None
            out.append(find_threshold(case, level.p, cells=cells))
    return out


# ------------------------------------------------------------------------ references


@dataclass(kw_only=True)
class Reference:
    threshold: float
    lower: float
    upper: float
    point: float
    cells: int
    seconds: float
    closed_form: float | None

    @property
    def exact(self) -> float:
        return self.closed_form if self.closed_form is not None else self.point

    @property
    def interval(self) -> tuple[float, float]:
        """Where the exact value lies: the closed form, else the recursion's rigorous bounds."""
        if self.closed_form is not None:
            return self.closed_form, self.closed_form
        return self.lower, self.upper

    @property
    def width(self) -> float:
        """(upper - lower) / point: the bounds' full relative width."""
        return (self.upper - self.lower) / self.point if self.point > 0 else math.inf


def reference(case: Case, x: float, *, cells: int, max_cells: int) -> Reference:
    """The recursion's bounds, the grid doubled until their relative width is WIDTH_TARGET or
    the cell limit is reached, and the closed form where there is one."""
    while True:
        start = time.perf_counter()
        lower, upper, point = exceedance_bounds(case.portfolio, [x], cells=cells)[0]
        elapsed = time.perf_counter() - start
        width = (upper - lower) / point if point > 0 else math.inf
        if width <= WIDTH_TARGET or 2 * cells > max_cells:
            break
        cells *= 2
    cf = case.closed_form(x) if case.closed_form is not None else None
    return Reference(threshold=x, lower=lower, upper=upper, point=point, cells=cells,
                     seconds=elapsed, closed_form=cf)


# ------------------------------------------------------------------------ measurements


@dataclass(kw_only=True)
class Run:
    """One estimator at one threshold: the estimate, best-of-repeats time and peak memory."""

    method: str
    used: str = ""
    probability: float = math.nan
    std_error: float | None = None
    relative_error: float | None = None
    ci_high: float = math.nan
    hits: int = 0
    reliable: bool = False
    reason: str = ""
    seconds: float = math.nan
    peak_mb: float = math.nan
    refused: str = ""
    z: float | None = None  # (estimate - exact) / std_error
    z_bounds: float | None = None  # distance outside Reference.interval in std_errors


def best_time(fn: Callable[[], Any], repeats: int) -> tuple[Any, float]:
    out, best = None, math.inf
    for _ in range(repeats):
        start = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - start)
    return out, best


def peak_memory_mb(fn: Callable[[], Any]) -> float:
    # numpy reports its buffers to tracemalloc, so this is the peak of Python plus array memory
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def _call(portfolio: Portfolio, x: float, method: str, samples: int) -> Callable[[], Any]:
    return partial(exceedance, portfolio, [x], method=method,
                   precision=Precision(samples=samples), seed=SEED)


def measure(portfolio: Portfolio, x: float, method: str, ref: Reference, *,
            samples: int) -> Run:
    """One run of `method` at threshold x, timed once (run_level retimes), compared with the
    reference."""
    try:
        res, seconds = best_time(_call(portfolio, x, method, samples), 1)
    except (MethodError, LimitError) as exc:
        return Run(method=method, refused=str(exc))
    e = res.estimates[0]
    run = Run(method=method, used=res.method, probability=e.probability, std_error=e.std_error,
              relative_error=e.relative_error, ci_high=e.ci_high, hits=e.hits,
              reliable=e.diagnostics.reliable, reason=e.diagnostics.reason, seconds=seconds)
    if e.std_error:
        run.z = (e.probability - ref.exact) / e.std_error
        lower, upper = ref.interval
        outside = max(lower - e.probability, e.probability - upper, 0.0)
        run.z_bounds = outside / e.std_error
    return run


def run_level(portfolio: Portfolio, x: float, methods: Sequence[str], ref: Reference, *,
              samples: int, repeats: int, memory: bool) -> dict[str, Run]:
    """Every method at one threshold. The repeats go round the methods in turn, so a burst of
    load from other jobs on the machine hits all of them alike; each keeps its best time."""
    runs = {m: measure(portfolio, x, m, ref, samples=samples) for m in methods}
    live = {m: r for m, r in runs.items() if not r.refused}
    for _ in range(repeats - 1):
        for m, run in live.items():
            run.seconds = min(run.seconds, best_time(_call(portfolio, x, m, samples), 1)[1])
    if memory:
        for m, run in live.items():
            run.peak_mb = peak_memory_mb(_call(portfolio, x, m, samples))
    return runs


def wnv(run: Run, samples: int) -> tuple[float, bool]:
    """Work-normalised variance, relative_error**2 * seconds, and whether it is a bound (crude
    with no hits: the rule of three, P <= ci_high, so relvar per sample >= (1 - q)/q)."""
    if run.relative_error is not None and run.hits > 0:
        return run.relative_error**2 * run.seconds, False
    if run.method == "crude" and run.hits == 0 and math.isfinite(run.ci_high):
        q = run.ci_high
        return (1.0 - q) / q * run.seconds / samples, True
    return math.inf, False


def exact_crude_wnv(crude: Run, p: float, samples: int) -> float:
    # crude's per-sample variance is exactly p (1 - p): relative variance (1 - p)/p
    return (1.0 - p) / p * crude.seconds / samples


def ratio(a: float, b: float) -> float:
    return a / b if b > 0 else math.inf


def usable(run: Run) -> bool:
    """An estimate whose variance can be compared: hits, marked reliable and within 4 reported
    standard errors of where the exact value lies."""
    return run.hits > 0 and run.reliable and run.z_bounds is not None and run.z_bounds <= 4.0


def violation(run: Run) -> bool:
    """Marked reliable, yet more than 4 standard errors outside where the exact value lies (the
    closed form, or the recursion's bounds, which contain it)."""
    return bool(run.reliable and run.z_bounds is not None and run.z_bounds > 4.0)


@dataclass(kw_only=True)
class Row:
    case: str
    label: str
    level: str
    reference: Reference
    runs: dict[str, Run] = field(default_factory=dict)

    def summary(self, samples: int) -> dict[str, Any]:
        """Ratios within this row: against crude, and auto against the best usable estimator."""
        crude = self.runs["crude"]
        base, bound = wnv(crude, samples)
        exact_base = exact_crude_wnv(crude, self.reference.exact, samples)
        ratios = {m: ratio(base, wnv(r, samples)[0]) for m, r in self.runs.items()
                  if m != "crude"}
        exact_ratios = {m: ratio(exact_base, wnv(r, samples)[0]) for m, r in self.runs.items()
                        if m != "crude"}
        rivals = {m: wnv(r, samples)[0] for m, r in self.runs.items()
                  if m != "auto" and usable(r)}
        auto = self.runs["auto"]
        best = min(rivals, key=lambda m: rivals[m]) if rivals else None
        factor = ratio(wnv(auto, samples)[0], rivals[best]) if best else math.nan
        own = self.runs.get(auto.used)
        own_factor = ratio(wnv(own, samples)[0], rivals[best]) if best and own else math.nan
        # what auto spends on the pilots and the adaptation before its main run
        pilot = auto.seconds - own.seconds if own else math.nan
        return {"crude_is_bound": bound, "vs_crude": ratios, "vs_exact_crude": exact_ratios,
                "best": best, "auto_over_best": factor, "auto_own_over_best": own_factor,
                "pilot_seconds": pilot,
                "auto_violation": violation(auto)}


def run_case(case: Case, *, samples: int, repeats: int, cells: int, max_cells: int,
             search_cells: int, memory: bool) -> list[Row]:
    rows = []
    for level, x in zip(case.levels, thresholds(case, cells=search_cells), strict=True):
        ref = reference(case, x, cells=cells, max_cells=max_cells)
        runs = run_level(case.portfolio, x, methods_for(case.portfolio), ref, samples=samples,
                         repeats=repeats, memory=memory)
        rows.append(Row(case=case.key, label=case.label, level=level.label, reference=ref,
                        runs=runs))
    return rows


def amortised(rows: Sequence[Row], cases: Sequence[Case], *, row_samples: int, samples: int,
              repeats: int) -> list[dict[str, Any]]:
    """Where auto's WNV (at `row_samples`) is more than twice the best estimator's, both again
    at `samples`: the pilots and the adaptation are a fixed cost, so the factor should
    shrink."""
    out = []
    for row in rows:
        s = row.summary(row_samples)
        if not s["best"] or not s["auto_over_best"] > 2.0:
            continue
        case = next(c for c in cases if c.key == row.case)
        runs = run_level(case.portfolio, row.reference.threshold, ["auto", s["best"]],
                         row.reference, samples=samples, repeats=repeats, memory=False)
        auto, best = runs["auto"], runs[s["best"]]
        out.append({"case": row.case, "label": row.label, "level": row.level,
                    "samples": samples, "used": auto.used,
                    "auto_relative_error": auto.relative_error, "auto_seconds": auto.seconds,
                    "best": s["best"], "best_relative_error": best.relative_error,
                    "best_seconds": best.seconds,
                    "auto_over_best": ratio(wnv(auto, samples)[0], wnv(best, samples)[0])})
    return out


# ------------------------------------------------------------------------ sweeps


def sweep_thresholds(rows: Sequence[Row], log10_ps: Sequence[float]) -> list[float]:
    """Thresholds near the given tail probabilities: log x interpolated linearly in log P
    through the case's panel thresholds (extrapolated from the end segments)."""
    pts = sorted((math.log10(r.reference.exact), math.log(r.reference.threshold)) for r in rows
                 if r.reference.exact > 0)
    lp, lx = np.array([p for p, _ in pts]), np.array([x for _, x in pts])
    out = []
    for q in log10_ps:
        i = int(np.clip(np.searchsorted(lp, q), 1, lp.size - 1))
        slope = (lx[i] - lx[i - 1]) / (lp[i] - lp[i - 1])
        out.append(float(np.exp(lx[i - 1] + slope * (q - lp[i - 1]))))
    return sorted(out)


def tail_sweep(case: Case, rows: Sequence[Row], *, log10_ps: Sequence[float], samples: int,
               cells: int) -> dict[str, Any]:
    """Relative error against the exact probability as the threshold moves into the tail, one
    sample set per method for all thresholds."""
    xs = sweep_thresholds(rows, log10_ps)
    bounds = exceedance_bounds(case.portfolio, xs, cells=cells)
    exact = [case.closed_form(x) if case.closed_form else b[2]
             for x, b in zip(xs, bounds, strict=True)]
    series = {}
    for method in methods_for(case.portfolio):
        try:
            res = exceedance(case.portfolio, xs, method=method,
                             precision=Precision(samples=samples), seed=SEED)
        except (MethodError, LimitError):
            continue
        series[method] = {
            "used": res.method,
            "relative_error": [e.relative_error for e in res.estimates],
            "reliable": [e.diagnostics.reliable for e in res.estimates],
        }
    return {"case": case.key, "label": case.label, "thresholds": xs, "exact": exact,
            "samples": samples, "series": series}


def timed(portfolio: Portfolio, x: float, method: str, samples: int, repeats: int) -> float:
    return best_time(_call(portfolio, x, method, samples), repeats)[1]


def cost_vs_samples(counts: Sequence[int], repeats: int) -> list[dict[str, Any]]:
    """Seconds against the sample count, at the threshold where P is near 1e-6."""
    out = []
    for key in ("lognormal_n10", "gamma_n20"):
        case = next(c for c in CASES if c.key == key)
        x = find_threshold(case, 1e-6, cells=2048)
        for method in methods_for(case.portfolio):
            for n in counts:
                t = timed(case.portfolio, x, method, n, repeats)
                out.append({"case": key, "method": method, "samples": n, "seconds": t})
    return out


def cost_vs_claims(claims: Sequence[int], samples: int, repeats: int) -> list[dict[str, Any]]:
    """Seconds against the number of claims per sample (fixed counts), P near 1e-6 by the
    larger of the one-big-claim and normal approximations (lognormal), or exactly (gamma)."""
    out = []
    for n in claims:
        logn = single(Fixed(n=n), Lognormal(mu=0.0, sigma=1.0))
        gam = single(Fixed(n=n), Gamma(shape=2.0, scale=1.0))
        for family, port, x in (
            ("lognormal(0,1)", logn, _guess(logn, 1e-6)),
            ("gamma(2,1)", gam, float(stats.gamma(2.0 * n).isf(1e-6))),  # gamma additivity
        ):
            for method in methods_for(port):
                t = timed(port, x, method, samples, repeats)
                out.append({"family": family, "claims": n, "method": method,
                            "samples": samples, "seconds": t})
    return out


def recursion_target(cells_list: Sequence[int], repeats: int, half_width: float = 5e-4
                     ) -> dict[str, Any]:
    """Bounds' width and time for Poisson(5) lognormal(0, 1.5) at P near 1e-4, by grid size,
    and the public method="recursion" asked for `half_width` (5e-4: a full width of 1e-3)."""
    case = next(c for c in CASES if c.key == "poisson_lognormal")
    x = find_threshold(case, 1e-4, cells=4096)
    rows = []
    for cells in cells_list:
        bounds, t = best_time(partial(exceedance_bounds, case.portfolio, [x], cells=cells),
                              repeats)
        lo, hi, pt = bounds[0]
        rows.append({"cells": cells, "lower": lo, "upper": hi, "point": pt,
                     "width": (hi - lo) / pt, "seconds": t})
    res, t = best_time(lambda: exceedance(case.portfolio, [x], method="recursion",
                                          precision=Precision(relative_error=half_width)), repeats)
    e = res.estimates[0]
    public = {"seconds": t, "width": (e.ci_high - e.ci_low) / e.probability,
              "reason": e.diagnostics.reason, "point": e.probability}
    return {"threshold": x, "grid": rows, "public": public, "half_width": half_width}


# ------------------------------------------------------------------------ machine and output


def machine() -> dict[str, Any]:
    model = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        model = platform.processor()
    return {"nproc": os.cpu_count(), "cpu": model, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__,
            "load_average": list(os.getloadavg())}


def fmt(v: Any, digits: int = 3) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        if math.isnan(v):
            return "-"
        if math.isinf(v):
            return "inf"
        return f"{v:.{digits}g}"
    return str(v)


def markdown(title: str, header: Sequence[str], rows: Sequence[Sequence[Any]]) -> str:
    lines = [f"### {title}", "", "| " + " | ".join(header) + " |",
             "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(fmt(v) for v in r) + " |" for r in rows]
    return "\n".join(lines) + "\n"


def _cell_error(run: Run | None) -> str:
    if run is None:
        return "n/a"
    if run.refused:
        return "refused"
    if run.hits == 0:
        return "0 hits"
    mark = "" if run.reliable else " (flag)"
    return fmt(run.relative_error) + mark


def _cell_ratio(ratio: float | None, bound: bool) -> str:
    if ratio is None:
        return "n/a"
    if not math.isfinite(ratio) or ratio == 0.0:
        return "-"
    return (">=" if bound else "") + f"{ratio:.3g}"


def tables(rows: Sequence[Row], samples: int, extra: dict[str, Any]) -> str:
    parts = []
    parts.append(markdown(
        "Reference probabilities (recursion bounds; closed form where one exists)",
        ["case", "level", "threshold", "lower", "upper", "point", "closed form",
         "width", "cells", "s"],
        [[r.label, r.level, r.reference.threshold, *[fmt(v, 6) for v in (
            r.reference.lower, r.reference.upper, r.reference.point, r.reference.closed_form)],
          r.reference.width, r.reference.cells, r.reference.seconds] for r in rows]))
    parts.append(markdown(
        f"Relative error at {samples:g} samples ((flag) = marked unreliable; auto: method used)",
        ["case", "level", "P exact", *ESTIMATORS, "auto used"],
        [[r.label, r.level, r.reference.exact, *[_cell_error(r.runs.get(m)) for m in ESTIMATORS],
          r.runs["auto"].used] for r in rows]))
    summ = [r.summary(samples) for r in rows]
    parts.append(markdown(
        "Work-normalised variance against crude (crude / method; higher is better; >= : crude "
        "had no hits, rule-of-three bound; in brackets: against crude's exact variance)",
        ["case", "level", *ESTIMATORS[1:], "best usable", "auto / best", "auto's method / best",
         "pilot s"],
        [[r.label, r.level,
          *[_cell_ratio(s["vs_crude"].get(m), s["crude_is_bound"])
            + (f" ({s['vs_exact_crude'][m]:.3g})" if m in s["vs_exact_crude"]
               and math.isfinite(s["vs_exact_crude"][m]) else "")
            if m in r.runs else "n/a" for m in ESTIMATORS[1:]],
          s["best"], s["auto_over_best"], s["auto_own_over_best"], s["pilot_seconds"]]
         for r, s in zip(rows, summ, strict=True)]))
    amort = extra["amortised"]
    if amort:
        parts.append(markdown(
            "Rows where auto is more than 2x the best: the same two at ten times the samples",
            ["case", "level", "samples", "auto used", "auto rel. error", "auto s", "best",
             "best rel. error", "best s", "auto / best"],
            [[a["label"], a["level"], a["samples"], a["used"], a["auto_relative_error"],
              a["auto_seconds"], a["best"], a["best_relative_error"], a["best_seconds"],
              a["auto_over_best"]] for a in amort]))
    parts.append(markdown(
        f"Seconds per {samples:g} samples (best of repeats) / peak memory MB (tracemalloc)",
        ["case", "level", *ESTIMATORS],
        [[r.label, r.level, *[f"{fmt(r.runs[m].seconds)} / {fmt(r.runs[m].peak_mb)}"
                              if m in r.runs and not r.runs[m].refused else "n/a"
                              for m in ESTIMATORS]] for r in rows]))
    parts.append(markdown(
        "auto against the exact value (z = (estimate - exact) / std_error, exact = closed form "
        "or recursion point; outside = standard errors outside the closed form or the "
        "recursion bounds; violation = marked reliable and outside > 4)",
        ["case", "level", "used", "estimate", "rel. error", "exact", "bounds width", "z",
         "outside", "reliable", "violation"],
        [[r.label, r.level, r.runs["auto"].used, r.runs["auto"].probability,
          r.runs["auto"].relative_error, r.reference.exact,
          0.0 if r.reference.closed_form is not None else r.reference.width, r.runs["auto"].z,
          r.runs["auto"].z_bounds, r.runs["auto"].reliable, s["auto_violation"]]
         for r, s in zip(rows, summ, strict=True)]))
    parts.append(recursion_table(extra["recursion_target"]))
    return "\n".join(parts)


def recursion_table(rec: dict[str, Any]) -> str:
    return markdown(
        f"Recursion bounds, Poisson(5) lognormal(0,1.5) at x = {rec['threshold']:.6g} "
        f"(P = {rec['grid'][-1]['point']:.4g})",
        ["cells", "lower", "upper", "width (upper-lower)/point", "seconds"],
        [[g["cells"], fmt(g["lower"], 6), fmt(g["upper"], 6), g["width"], g["seconds"]]
         for g in rec["grid"]]
        + [[f"method=recursion, relative_error={rec['half_width']:g}", "", "",
            rec["public"]["width"], rec["public"]["seconds"]]])


def _plain(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, dict):
        return {k: _plain(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_plain(x) for x in v]
    if isinstance(v, np.generic):
        return _plain(v.item())
    return v


def row_json(row: Row, samples: int) -> dict[str, Any]:
    ref = asdict(row.reference) | {"exact": row.reference.exact, "width": row.reference.width}
    return {"case": row.case, "label": row.label, "level": row.level, "reference": ref,
            "runs": {m: asdict(r) for m, r in row.runs.items()}, "summary": row.summary(samples)}


@dataclass(frozen=True, kw_only=True)
class Budget:
    samples: int
    repeats: int
    cells: int
    max_cells: int
    search_cells: int
    memory: bool
    sweep: tuple[float, ...]
    sweep_cells: int
    cost_samples: tuple[int, ...]
    claims: tuple[int, ...]
    claims_samples: int
    recursion_cells: tuple[int, ...]
    recursion_half_width: float
    cases: tuple[str, ...] = tuple(c.key for c in CASES)


FULL = Budget(samples=100_000, repeats=3, cells=4096, max_cells=32_768, search_cells=2048,
              memory=True, sweep=tuple(float(v) for v in range(-2, -11, -1)), sweep_cells=4096,
              cost_samples=(1_000, 10_000, 100_000, 1_000_000),
              claims=(1, 3, 10, 30, 100, 300, 1000), claims_samples=20_000,
              recursion_cells=(4096, 8192, 16_384, 20_480, 32_768, 65_536),
              recursion_half_width=5e-4)
QUICK = Budget(samples=1_000, repeats=1, cells=512, max_cells=512, search_cells=512,
               memory=True, sweep=(-2.0, -4.0), sweep_cells=512, cost_samples=(500, 1_000),
               claims=(1, 5), claims_samples=500, recursion_cells=(512,),
               recursion_half_width=0.05,
               cases=("lognormal_n10", "poisson_exponential"))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="tiny budget (smoke test)")
    ap.add_argument("--out", type=Path, default=OUT, help="output folder (default bench/out)")
    ap.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    args = ap.parse_args(argv)
    budget = QUICK if args.quick else FULL
    cases = [c for c in CASES if c.key in budget.cases]
    started = time.perf_counter()
    info = machine()
    rows, sweeps = [], []
    for case in cases:
        case_rows = run_case(case, samples=budget.samples, repeats=budget.repeats,
                             cells=budget.cells, max_cells=budget.max_cells,
                             search_cells=budget.search_cells, memory=budget.memory)
        rows += case_rows
        sweeps.append(tail_sweep(case, case_rows, log10_ps=budget.sweep,
                                 samples=budget.samples, cells=budget.sweep_cells))
        print(f"[{time.perf_counter() - started:.0f} s] {case.label}", file=sys.stderr)
    extra = {
        "amortised": amortised(rows, cases, row_samples=budget.samples,
                               samples=10 * budget.samples, repeats=budget.repeats),
        "recursion_target": recursion_target(budget.recursion_cells, budget.repeats,
                                             budget.recursion_half_width),
        "cost_vs_samples": cost_vs_samples(budget.cost_samples, budget.repeats),
        "cost_vs_claims": cost_vs_claims(budget.claims, budget.claims_samples, budget.repeats),
    }
    info["load_average_end"] = list(os.getloadavg())
    info["elapsed_s"] = time.perf_counter() - started
    text = tables(rows, budget.samples, extra)
    print(text)
    results = {"machine": info, "budget": asdict(budget), "seed": SEED,
               "rows": [row_json(r, budget.samples) for r in rows], "sweeps": sweeps, **extra}
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "panel.md").write_text(text)
    (args.out / "panel.json").write_text(json.dumps(_plain(results), indent=1))
    if not args.no_plots:
        from bench import plots

        for path in plots.write_all(_plain(results), args.out):
            print(f"wrote {path}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
