"""No wasted samples, and thresholds sharing samples (issue 16): costs as ratios in one run.

    python -m bench.samplescale            # best of 7 interleaved repeats (~1 min)
    python -m bench.samplescale --quick    # a tiny budget, used by the smoke test

The floor is the time numpy needs to draw the 1e6 lognormal variates of a 1e5-sample request
(iid lognormal(0, 1), n = 10): `Generator.lognormal(0, 1, 10**6)`. Each figure is the best of
the repeats, which go round the calls in turn so that a burst of load on the shared machine hits
all of them alike. Over HTTP: the FastAPI TestClient (the app with its lifespan, its process
pool, one request at a time). Numbers are measurements, not pass/fail checks.
"""

from __future__ import annotations

import argparse
import json
import math
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from core import Fixed, Line, Lognormal, Portfolio, Precision
from core.exceedance import exceedance

OUT = Path(__file__).resolve().parent / "out"
SEED = 16
PORTFOLIO = Portfolio(lines=[Line(count=Fixed(n=10), severity=Lognormal(mu=0.0, sigma=1.0))])
# P near 1e-2 ... 1e-6 (the subexponential n * sf(x) puts them there; from memory).
FIVE = [40.0, 60.0, 90.0, 130.0, 180.0]
# Twenty thresholds from P near 1e-2 to 1e-8, and the one threshold they are compared with.
TWENTY = [float(x) for x in np.geomspace(40.0, 400.0, 20)]
ONE = TWENTY[10]


def best_of(calls: dict[str, Callable[[], Any]], repeats: int) -> dict[str, float]:
    """Best wall time of each call, the repeats interleaved across the calls."""
    best = {name: float("inf") for name in calls}
    for _ in range(repeats):
        for name, call in calls.items():
            start = time.perf_counter()
            call()
            best[name] = min(best[name], time.perf_counter() - start)
    return best


def _direct(method: str, xs: list[float], samples: int) -> Callable[[], Any]:
    return lambda: exceedance(PORTFOLIO, xs, method=method,
                              precision=Precision(samples=samples), seed=SEED)


def _body(method: str, xs: list[float], samples: int) -> dict[str, Any]:
    line = {"count": {"kind": "fixed", "n": 10},
            "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.0}}
    return {"portfolio": {"lines": [line]}, "thresholds": xs, "method": method,
            "precision": {"samples": samples}, "seed": SEED}


def pilots_table(samples: int, repeats: int, http: bool) -> dict[str, Any]:
    rng = np.random.default_rng(SEED)
    calls: dict[str, Callable[[], Any]] = {
        "numpy floor": lambda: rng.lognormal(0.0, 1.0, 10 * samples)}
    for method in ("auto", "conditional", "conditional_is", "crude"):
        calls[method] = _direct(method, FIVE, samples)
    chosen = exceedance(PORTFOLIO, FIVE, precision=Precision(samples=samples), seed=SEED)
    # The largest relative error over the five thresholds of each method's own run: with the
    # time it gives the work-normalised variance (seconds x relative error squared).
    errors = {m: max(e.relative_error or math.inf for e in exceedance(
        PORTFOLIO, FIVE, method=m, precision=Precision(samples=samples), seed=SEED).estimates)
        for m in ("auto", "conditional", "conditional_is", "crude")}
    if not http:
        return {"seconds": best_of(calls, repeats), "auto_chose": chosen.method,
                "reason": chosen.method_reason, "relative_error": errors}
    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.settings import Settings

    with tempfile.TemporaryDirectory() as tmp, TestClient(
            create_app(Settings(data_dir=Path(tmp), executor="process", workers=1))) as client:
        body = _body("auto", FIVE, samples)

        def post() -> None:
            response = client.post("/v1/exceedance", json=body)
            response.raise_for_status()

        post()  # warm-up: the worker's imports and first-call caches
        calls["auto over HTTP"] = post
        seconds = best_of(calls, repeats)
    return {"seconds": seconds, "auto_chose": chosen.method, "reason": chosen.method_reason,
            "relative_error": errors}


def _ratio(a: float | None, b: float | None) -> float:
    return math.nan if a is None or b is None or b == 0 else a / b


def sharing_table(samples: int, repeats: int) -> dict[str, Any]:
    """conditional_is on 20 thresholds at once against each threshold alone."""
    calls = {"one threshold": _direct("conditional_is", [ONE], samples),
             "twenty thresholds": _direct("conditional_is", TWENTY, samples)}
    seconds = best_of(calls, repeats)
    shared = exceedance(PORTFOLIO, TWENTY, method="conditional_is",
                        precision=Precision(samples=samples), seed=SEED).estimates
    rows = []
    for x, est in zip(TWENTY, shared, strict=True):
        alone = exceedance(PORTFOLIO, [x], method="conditional_is",
                           precision=Precision(samples=samples), seed=SEED).estimates[0]
        rows.append({"threshold": x, "probability": est.probability,
                     "shared_relative_error": est.relative_error,
                     "alone_relative_error": alone.relative_error,
                     "ratio": _ratio(est.relative_error, alone.relative_error),
                     "shared_reliable": est.diagnostics.reliable,
                     "alone_reliable": alone.diagnostics.reliable,
                     "shared_pareto_k": est.diagnostics.pareto_k})
    return {"seconds": seconds, "rows": rows}


def _print(pilots: dict[str, Any], sharing: dict[str, Any], samples: int) -> None:
    sec = pilots["seconds"]
    floor = sec["numpy floor"]
    print(f"\n## Exceedance, lognormal(0,1), n = 10, five thresholds, {samples:g} samples\n")
    print(f"auto chose {pilots['auto_chose']}: {pilots['reason']}\n")
    print("| call | seconds | x numpy floor | largest rel. error | seconds x rel. error^2 |")
    print("|---|---|---|---|---|")
    errors = pilots["relative_error"]
    for name, s in sec.items():
        err = errors.get(name.removesuffix(" over HTTP"))
        wnv = "" if err is None else f"{s * err ** 2:.3g}"
        print(f"| {name} | {s:.4f} | {s / floor:.2f} | {'' if err is None else f'{err:.3g}'} "
              f"| {wnv} |")
    sec2 = sharing["seconds"]
    print(f"\n## conditional_is: twenty thresholds in one sample set, {samples:g} samples\n")
    print(f"cost: twenty thresholds {sec2['twenty thresholds']:.4f} s, one threshold "
          f"({ONE:.4g}) {sec2['one threshold']:.4f} s, ratio "
          f"{sec2['twenty thresholds'] / sec2['one threshold']:.2f}\n")
    print("| threshold | P | rel. error shared | alone | ratio | reliable shared/alone | "
          "k-hat shared |")
    print("|---|---|---|---|---|---|---|")
    for r in sharing["rows"]:
        print(f"| {r['threshold']:.4g} | {r['probability']:.4g} | "
              f"{r['shared_relative_error']:.3g} | {r['alone_relative_error']:.3g} | "
              f"{r['ratio']:.2f} | {r['shared_reliable']}/{r['alone_reliable']} | "
              f"{r['shared_pareto_k']:.3g} |")
    worst = max(r["ratio"] for r in sharing["rows"])
    print(f"\nworst ratio of relative errors (shared / alone): {worst:.2f}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--no-http", action="store_true", help="skip the TestClient figure")
    args = parser.parse_args(argv)
    samples, repeats = (2_000, 1) if args.quick else (100_000, 7)
    pilots = pilots_table(samples, repeats, http=not args.no_http)
    sharing = sharing_table(samples, repeats)
    _print(pilots, sharing, samples)
    OUT.mkdir(exist_ok=True)
    name = "samplescale_quick.json" if args.quick else "samplescale.json"
    (OUT / name).write_text(json.dumps({"pilots": pilots, "sharing": sharing}, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
