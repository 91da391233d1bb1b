"""Benchmarks of the exceedance engine: prints tables, writes bench/out/results.json.

    python -m bench.run            # the full panel (a few minutes on 2 cores)
    python -m bench.run --quick    # a tiny budget, used by the smoke test

Numbers are measurements, not pass/fail checks.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
from scipy import stats

from core import ClaimCount, Fixed, Gamma, Line, Lognormal, Poisson, Portfolio, Precision, Severity
from core.exceedance import exceedance

OUT = Path(__file__).resolve().parent / "out"


def single(count: ClaimCount, severity: Severity) -> Portfolio:
    return Portfolio(lines=[Line(count=count, severity=severity)])


def table(title: str, header: list[str], rows: list[list[Any]]) -> None:
    print(f"\n## {title}\n")
    print("| " + " | ".join(header) + " |")
    print("|" + "|".join("---" for _ in header) + "|")
    for r in rows:
        print("| " + " | ".join(_fmt(v) for v in r) + " |")


def _fmt(v: object) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def reference(port: Portfolio, xs: list[float]) -> list[float | None]:
    """Deterministic bounds' midpoint from the recursion engine, when it is available."""
    try:
        from core.recursion import exceedance_bounds
    except ImportError:
        return [None] * len(xs)
    try:
        return [b[2] for b in exceedance_bounds(port, xs)]
    except Exception:
        return [None] * len(xs)


def lognormal_n10(samples: int) -> list[list[Any]]:
    sev = stats.lognorm(s=1.0)
    xs = [float(sev.isf(p / 10)) for p in (1e-3, 1e-6, 1e-9, 1e-12)]
    port = single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0))
    rows = []
    for method in ("conditional", "auto"):
        res = exceedance(port, xs, method=method, precision=Precision(samples=samples), seed=1)
        for e in res.estimates:
            rows.append([method, res.method, e.threshold, e.probability, e.relative_error,
                         e.diagnostics.reliable])
    return rows


def hard_regime(samples: int) -> list[list[Any]]:
    rows = []
    for n, sigma in ((50, 0.5), (100, 0.25)):
        port = single(Fixed(n=n), Lognormal(mu=0.0, sigma=sigma))
        xs = [port.mean + k * port.std_dev for k in (5, 8, 12)]
        ref = reference(port, xs)
        for method in ("conditional", "auto"):
            res = exceedance(port, xs, method=method, precision=Precision(samples=samples),
                             seed=1)
            for k, e, r in zip((5, 8, 12), res.estimates, ref, strict=True):
                ratio = e.probability / r if r else None
                z = (e.probability - r) / e.std_error if r and e.std_error else None
                rows.append([f"n={n} sigma={sigma}", f"{k} sd", method, res.method,
                             e.probability, e.relative_error, r, ratio, z,
                             e.diagnostics.reliable])
    return rows


def light_and_compound(samples: int) -> list[list[Any]]:
    rows = []
    port = single(Fixed(n=20), Gamma(shape=2.0, scale=1.0))
    x = float(stats.gamma(40.0).isf(1e-10))
    exact = float(stats.gamma(40.0).sf(x))  # sum of gammas is gamma(40, 1)
    e = exceedance(port, [x], method="auto", precision=Precision(samples=samples),
                   seed=1).estimates[0]
    rows.append(["gamma(2,1) n=20", e.method, e.probability, e.relative_error, exact,
                 (e.probability - exact) / e.std_error if e.std_error else None])
    port = single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))
    x = float(stats.lognorm(s=1.5).isf(1e-6 / 5))
    ref = reference(port, [x])[0]
    e = exceedance(port, [x], method="auto", precision=Precision(samples=samples),
                   seed=1).estimates[0]
    rows.append(["Poisson(5) lognormal(0,1.5)", e.method, e.probability, e.relative_error,
                 ref, (e.probability - ref) / e.std_error if ref and e.std_error else None])
    sev = stats.lognorm(s=1.0)
    x = float(sev.isf(1e-31))
    port = single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0))
    e = exceedance(port, [x], precision=Precision(samples=samples), seed=1).estimates[0]
    asym = 10 * float(sev.sf(x))  # subexponential asymptotic n P(X > x)
    rows.append(["lognormal n=10 far tail", e.method, e.probability, e.relative_error, asym,
                 e.probability / asym])
    return rows


def speed(samples: int, repeats: int = 5) -> list[list[Any]]:
    sev = stats.lognorm(s=1.0)
    xs = [float(sev.isf(p / 10)) for p in (1e-3, 1e-5, 1e-7, 1e-9, 1e-11)]
    port = single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0))
    rng = np.random.default_rng(0)

    def best(fn: Callable[[], object]) -> float:
        times = []
        for _ in range(repeats):
            t = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t)
        return min(times)

    base = best(lambda: rng.lognormal(0.0, 1.0, size=samples * 10))
    rows = [["numpy lognormal draws", samples * 10, base, 1.0]]
    for method in ("conditional", "auto"):
        def run(m: str = method) -> object:
            return exceedance(port, xs, method=m, precision=Precision(samples=samples), seed=1)

        t = best(run)
        rows.append([f"exceedance {method}, 5 thresholds", samples, t, t / base])
    return rows


def memory(samples: int) -> list[list[Any]]:
    code = (
        "import resource, time; from core import *; "
        "p = Portfolio(lines=[Line(count=Fixed(n=100), severity=Lognormal(mu=0.0, sigma=1.0))]); "
        f"t = time.perf_counter(); estimate_exceedance(p, [300.0], method='conditional', "
        f"precision=Precision(samples={samples}), seed=1); "
        "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, "
        "time.perf_counter() - t)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    return [["100 claims per sample", samples, float(out[0]), float(out[1])]]


def diagnostics_flags(samples: int, seeds: int) -> list[list[Any]]:
    rows = []
    cases = [
        ("lognormal(0,0.5) n=50, 5 sd", 50, 0.5, 5.0),
        ("lognormal(0,0.5) n=50, 8 sd", 50, 0.5, 8.0),
    ]
    for label, n, sigma, k in cases:
        port = single(Fixed(n=n), Lognormal(mu=0.0, sigma=sigma))
        x = port.mean + k * port.std_dev
        flags = sum(not exceedance(port, [x], method="conditional",
                                   precision=Precision(samples=samples),
                                   seed=s).estimates[0].diagnostics.reliable
                    for s in range(seeds))
        rows.append([label, "conditional (plain)", f"{flags}/{seeds}"])
    port = single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0))
    x = float(stats.lognorm(s=1.0).isf(1e-6))
    flags = sum(not exceedance(port, [x], method="conditional",
                               precision=Precision(samples=samples),
                               seed=s).estimates[0].diagnostics.reliable for s in range(seeds))
    rows.append(["lognormal(0,1) n=10, P ~ 1e-5", "conditional (plain)", f"{flags}/{seeds}"])
    return rows


def risk_measures(samples: int) -> list[list[Any]]:
    from core.measures import tail_estimates

    rows = []
    books = [
        ("Poisson(5) lognormal(0,1.5)", single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))),
        ("lognormal(0,1) n=10", single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0))),
        ("gamma(2,1) n=20", single(Fixed(n=20), Gamma(shape=2.0, scale=1.0))),
    ]
    for label, port in books:
        res = tail_estimates(port, levels=[0.995, 0.999, 0.9999],
                             precision=Precision(samples=samples), seed=1)
        for m in res.measures:
            rows.append([label, res.method, m.level, m.var.value,
                         (m.var.ci_high - m.var.ci_low) / 2 / m.var.value, m.tvar.value,
                         (m.tvar.ci_high - m.tvar.ci_low) / 2 / m.tvar.value])
    return rows


def level_cost(samples: int) -> list[list[Any]]:
    from core.measures import tail_estimates

    port = single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5))
    rows = []
    base = None
    for levels in ([0.999], list(np.linspace(0.99, 0.9999, 10))):
        for method in ("conditional", "auto"):
            t = time.perf_counter()
            tail_estimates(port, levels=levels, method=method,
                           precision=Precision(samples=samples), seed=1)
            elapsed = time.perf_counter() - t
            if len(levels) == 1:
                base = base or {}
                base[method] = elapsed
            rows.append([method, len(levels), elapsed, elapsed / base[method]])
    return rows


def diagnostics_cost(samples: int, repeats: int = 3) -> list[list[Any]]:
    """Share of a whole exceedance request spent accumulating contributions and computing the
    diagnostics (top-k, batches, k-hat, ESS): ContributionStats' methods are timed inside the
    call. Best of `repeats` by total time."""
    from core import diagnostics

    spent = [0.0]
    cls = diagnostics.ContributionStats
    originals = (cls.from_samples, cls.combine, cls.diagnose)

    def timed(fn: Callable[..., Any]) -> Callable[..., Any]:
        def inner(*args: Any, **kwargs: Any) -> Any:
            t = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                spent[0] += time.perf_counter() - t
        return inner

    sev = stats.lognorm(s=1.0)
    cases = [
        ("lognormal(0,1) n=10, 5 thresholds", single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0)),
         [float(sev.isf(p / 10)) for p in (1e-3, 1e-5, 1e-7, 1e-9, 1e-11)], "conditional"),
        ("lognormal(0,1) n=10, 5 thresholds", single(Fixed(n=10), Lognormal(mu=0.0, sigma=1.0)),
         [float(sev.isf(p / 10)) for p in (1e-3, 1e-5, 1e-7, 1e-9, 1e-11)], "auto"),
        ("Poisson(5) lognormal(0,1.5)", single(Poisson(mean=5.0), Lognormal(mu=0.0, sigma=1.5)),
         [1500.0], "auto"),
        ("gamma(2,1) n=20", single(Fixed(n=20), Gamma(shape=2.0, scale=1.0)),
         [float(stats.gamma(40.0).isf(1e-10))], "auto"),
    ]
    rows = []
    # Timing patches on the class (restored below); mypy cannot follow classmethod swaps.
    cls.from_samples = classmethod(timed(originals[0].__func__))  # type: ignore[method-assign, assignment, attr-defined]
    cls.combine = classmethod(timed(originals[1].__func__))  # type: ignore[method-assign, assignment, attr-defined]
    cls.diagnose = timed(originals[2])  # type: ignore[method-assign]
    try:
        for label, port, xs, method in cases:
            best = None
            for _ in range(repeats):
                spent[0] = 0.0
                t = time.perf_counter()
                exceedance(port, xs, method=method, precision=Precision(samples=samples), seed=1)
                total = time.perf_counter() - t
                if best is None or total < best[0]:
                    best = (total, spent[0])
            assert best is not None
            rows.append([label, method, samples, best[0], best[1], best[1] / best[0]])
    finally:
        cls.from_samples, cls.combine, cls.diagnose = originals  # type: ignore[method-assign]
    return rows


def ruin_table(samples: int) -> list[list[Any]]:
    """The ruin issue's cases against the exponential closed form (Siegmund) and the
    subexponential asymptotic / recursion for heavy tails."""
    from core import Exponential, Pareto, SurplusProcess
    from core.ruin.api import ruin

    rows = []
    theta = 0.1
    proc = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=theta)

    def closed(u: float) -> float:  # exponential claims, classical closed form
        return math.exp(-theta * u / (1.0 + theta)) / (1.0 + theta)

    us = [(1.1 / theta) * math.log(1.0 / (p * 1.1)) for p in (1e-2, 1e-8)]
    res = ruin(proc, us, target_probability=1e-3, precision=Precision(samples=10_000), seed=1)
    for e in res.estimates:
        exact = closed(e.capital)
        rows.append(["exponential, theta 0.1", res.method, 10_000, e.capital, e.probability,
                     e.relative_error, exact,
                     (e.probability - exact) / e.std_error if e.std_error else None])
    cap = res.capital_for_target
    assert cap is not None and cap.capital is not None  # a target was asked for
    u_exact = (1.1 / theta) * math.log(1.0 / (1e-3 * 1.1))
    rows.append(["capital for 1e-3 (exponential)", res.method, 10_000, cap.capital, 1e-3,
                 None, u_exact, cap.capital / u_exact - 1.0])
    heavy = [("Lomax(3, 2), theta 0.2", SurplusProcess(
        claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2), [165.0, 4470.0]),
             ("lognormal(-0.5, 1), theta 0.25", SurplusProcess(
                 claim_rate=1.0, severity=Lognormal(mu=-0.5, sigma=1.0), loading=0.25),
              [57.0, 185.0])]
    for label, proc_h, caps in heavy:
        res = ruin(proc_h, caps, precision=Precision(samples=samples), seed=1)
        for e in res.estimates:
            rows.append([label, res.method, samples, e.capital, e.probability,
                         e.relative_error, e.approximation, None])
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true", help="tiny budget (smoke test)")
    args = ap.parse_args(argv)
    n = 2_000 if args.quick else 100_000
    results: dict[str, list[list[Any]]] = {}

    results["lognormal_n10"] = lognormal_n10(n)
    table("iid lognormal(0, 1), n = 10", ["method", "used", "threshold", "P", "rel. error",
                                          "reliable"], results["lognormal_n10"])
    results["hard_regime"] = hard_regime(n)
    table("Hard regime (many moderate claims)", ["case", "threshold", "method", "used", "P",
          "rel. error", "recursion", "P / recursion", "z", "reliable"], results["hard_regime"])
    results["light_and_compound"] = light_and_compound(n)
    table("Other cases", ["case", "used", "P", "rel. error", "reference", "z or ratio"],
          results["light_and_compound"])
    results["speed"] = speed(n, repeats=1 if args.quick else 5)
    table("Speed (best of repeats)", ["what", "samples", "seconds", "ratio to numpy"],
          results["speed"])
    results["memory"] = memory(10_000 if args.quick else 10_000_000)
    table("Memory", ["portfolio", "samples", "peak RSS MB", "seconds"], results["memory"])
    results["diagnostics"] = diagnostics_flags(n, 2 if args.quick else 20)
    table("Reliability flags over seeds", ["case", "estimator", "flagged"],
          results["diagnostics"])
    results["risk_measures"] = risk_measures(n)
    table("VaR and TVaR (relative half-widths of the 95% intervals)",
          ["book", "used", "level", "VaR", "VaR half-width", "TVaR", "TVaR half-width"],
          results["risk_measures"])
    results["level_cost"] = level_cost(n)
    table("Cost of many levels (one sample set)", ["method", "levels", "seconds",
          "ratio to one level"], results["level_cost"])
    results["ruin"] = ruin_table(n)
    table("Ruin probabilities", ["case", "used", "samples", "capital", "psi", "rel. error",
          "closed form / asymptotic", "z or rel. diff"], results["ruin"])
    results["diagnostics_cost"] = diagnostics_cost(n, repeats=1 if args.quick else 3)
    table("Cost of the diagnostics (share of the whole request)", ["case", "method", "samples",
          "request s", "accumulation + diagnostics s", "share"], results["diagnostics_cost"])
    OUT.mkdir(exist_ok=True)
    (OUT / "results.json").write_text(json.dumps(results, indent=1, default=_json_default))
    return 0


def _json_default(v: object) -> object:
    if isinstance(v, (np.floating, np.integer)):
        return v.item()
    return None if isinstance(v, float) and not math.isfinite(v) else str(v)


if __name__ == "__main__":
    raise SystemExit(main())
