"""Benchmarks of fitting and parameter risk: prints tables (measurements, not checks).

    python -m bench.fit            # the README's numbers (several minutes on 2 cores)
    python -m bench.fit --quick    # tiny budgets

1. A 10,000-claim fit of every family (wall and CPU time), with the default bootstrap and
   with a single replicate (the fits alone). CPU time is the figure to read on a shared
   machine; wall time includes waiting for the cores.
2. A lognormal(1, 1.5) sample of 500 claims -> fit -> a Poisson(20) line -> VaR at 0.995 from
   1e5 samples: the sampling interval against the interval with parameter risk (the ratio).
3. The worked example (openapi_examples/fit_commercial_property_fire.json) end to end: fit ->
   portfolio line -> VaR at 0.995 with both intervals.
"""

from __future__ import annotations

import argparse
import json
import time
from typing import Any

import numpy as np

from bench import make_fit_example as example
from core import Line, NegativeBinomial, Poisson, Portfolio, Precision
from core.fitting.api import fit_claims
from core.fitting.results import Fit
from core.parameter_figures import tail_estimates_with_parameter_risk
from core.parameter_risk import ParameterInterval, ParameterUncertainty


def table(title: str, header: list[str], rows: list[list[Any]]) -> None:
    print(f"\n{title}")
    cells = [header, *[[f"{v:.4g}" if isinstance(v, float) else str(v) for v in r]
                       for r in rows]]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    for r in cells:
        print("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))


def timed(**kwargs: Any) -> tuple[Any, float, float]:
    wall, cpu = time.perf_counter(), time.process_time()
    out = fit_claims(**kwargs)
    return out, time.perf_counter() - wall, time.process_time() - cpu


def speed(n: int) -> None:
    x = np.random.default_rng(np.random.SeedSequence(1)).lognormal(1.0, 1.5, n)
    rows = []
    cases = (("default bootstrap (49 x 500 claims)", 49), ("fits only (1 replicate)", 1))
    for label, reps in cases:
        report, wall, cpu = timed(claims=x.tolist(), replicates=reps, seed=1)
        rows.append([label, len(report.fits), wall, cpu])
    table(f"Fit of every family to {n} lognormal(1, 1.5) claims (seconds)",
          ["bootstrap", "families", "wall", "cpu"], rows)


def _var_rows(label: str, fit: Fit, count: Any, samples: int, draws: int,
              seed: int) -> list[Any]:
    assert fit.covariance is not None
    line = Line(count=count, severity=fit.severity)
    wall = time.perf_counter()
    result, nested = tail_estimates_with_parameter_risk(
        Portfolio(lines=[line]),
        {0: ParameterUncertainty(covariance=fit.covariance.tolist(), draws=draws)},
        levels=[0.995], precision=Precision(samples=samples), seed=seed)
    p = nested.intervals[0]
    assert isinstance(p, ParameterInterval)
    m = result.measures[0].var
    sampling, combined = m.ci_high - m.ci_low, p.ci_high - p.ci_low
    return [label, result.method, m.value, m.ci_low, m.ci_high, p.ci_low, p.ci_high,
            (p.parameter_high - p.parameter_low) / sampling, combined / sampling, p.dominant,
            p.draws, time.perf_counter() - wall]


HEADER = ["case", "method", "VaR", "sampling low", "sampling high", "with param. low",
          "with param. high", "param/sampling width", "combined/sampling", "dominant",
          "draws", "s"]


def ratio(samples: int, draws: int) -> list[Any]:
    x = np.random.default_rng(np.random.SeedSequence(2)).lognormal(1.0, 1.5, 500)
    report = fit_claims(claims=x.tolist(), families=["lognormal"], replicates=1, seed=2)
    fit = report.fits[0].fit
    print(f"\nlognormal(1, 1.5), 500 claims: mu = {fit.theta[0]:.4f} +- "
          f"{fit.std_errors['mu']:.4f}, sigma = {fit.theta[1]:.4f} +- "
          f"{fit.std_errors['sigma']:.4f}")
    return _var_rows("lognormal(1, 1.5), 500 claims, Poisson(20)", fit, Poisson(mean=20.0),
                     samples, draws, 3)


def worked_example(samples: int, draws: int) -> list[Any]:
    body = example.make()
    keys = ("reporting_threshold", "censored_at", "families", "tail_threshold", "counts",
            "exposures", "seed")
    report = fit_claims(claims=body["claims"], **{k: body[k] for k in keys},
                        replicates=body["bootstrap"]["replicates"])
    rows = [[ff.fit.family, ff.fit.aic, *(ff.tests[k].p_value for k in ("ks", "cvm", "ad")),
             json.dumps({k: round(v, 4) for k, v in ff.fit.parameters.items()})]
            for ff in sorted(report.fits, key=lambda f: f.fit.aic)]
    table(f"Worked example: {report.n} claims above {body['reporting_threshold']:g}, "
          f"{report.censored} at their limit (truth: lognormal mu {example.TRUTH_MU}, sigma "
          f"{example.TRUTH_SIGMA})", ["family", "AIC", "p KS", "p CvM", "p AD", "parameters"],
          rows)
    fit = next(ff.fit for ff in report.fits if ff.fit.family == "lognormal")
    assert report.counts is not None and report.counts.negative_binomial is not None
    nb = report.counts.negative_binomial
    mean = float(nb.theta[0]) * report.counts.exposure
    count = NegativeBinomial(mean=mean, dispersion=1.0 + mean / float(nb.theta[1]))
    return _var_rows("worked example, lognormal + negative binomial", fit, count, samples,
                     draws, 5)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    quick = parser.parse_args().quick
    speed(1000 if quick else 10_000)
    samples, draws = (2000, 20) if quick else (100_000, 30)
    rows = [ratio(samples, draws), worked_example(samples, 20)]
    table(f"VaR at 0.995 from {samples} samples: sampling interval vs the interval with "
          "parameter risk", HEADER, rows)


if __name__ == "__main__":
    main()
