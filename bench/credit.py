"""Credit-portfolio benchmarks: prints the table the issue asks for.

    python -m bench.credit           # 1e5 samples per figure (about a minute on 2 cores)
    python -m bench.credit --quick   # a tiny budget (smoke test)

Measurements, not pass/fail checks. References: quadrature of binomial tails over the factor
(tests/reference/credit_references.py) for the one-factor cases.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests" / "reference"))

from credit_references import one_factor_t_tail, one_factor_tail

from core.credit.exceedance import credit_exceedance
from core.credit.measures import credit_tail, guess_var
from core.credit.model import CreditModel, group
from core.precision import Precision

SEED = 20260


def one_factor(copula: str = "gaussian") -> CreditModel:
    return CreditModel(groups=(group(count=1000, exposure=1.0, default_probability=0.01,
                                     loss_given_default=0.45,
                                     factor_loadings=[math.sqrt(0.2)]),),
                       factors=1, copula=copula, df=5.0 if copula == "student_t" else None)


def heterogeneous(obligors: int = 5000) -> CreditModel:
    """10 groups, PD 0.1% to 5%, exposures 1 to 1000, three correlated factors."""
    pds = np.geomspace(0.001, 0.05, 10)
    exposures = np.geomspace(1.0, 1000.0, 10)
    shares = np.array([3, 2, 1] * 3 + [3], dtype=float)
    counts = np.maximum(1, np.round(obligors * shares / shares.sum())).astype(int)
    groups = []
    for g in range(10):
        b = np.zeros(3)
        b[g % 3], b[(g + 1) % 3] = 0.45, 0.2
        groups.append(group(count=int(counts[g]), exposure=float(exposures[g]),
                            default_probability=float(pds[g]), loss_given_default=0.45,
                            factor_loadings=list(b), label=f"group {g}"))
    corr = np.array([[1.0, 0.5, 0.3], [0.5, 1.0, 0.4], [0.3, 0.4, 1.0]])
    return CreditModel(groups=tuple(groups), factors=3, correlation=corr)


def row(name: str, x: float, est: object, ref: float | None, secs: float) -> list[str]:
    value = est.value  # type: ignore[attr-defined]
    se = est.std_error  # type: ignore[attr-defined]
    z = "" if ref is None or not se else f"{(value - ref) / se:+.2f}"
    return [name, f"{x:g}", f"{value:.4g}", "" if ref is None else f"{ref:.4g}",
            f"{est.relative_error:.2%}" if est.relative_error else "",  # type: ignore[attr-defined]
            z, f"{secs:.2f}"]


def show(header: list[str], rows: list[list[str]]) -> None:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)))
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)))
    print()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args(argv)
    n = 2000 if args.quick else 100_000
    prec = Precision(samples=n)
    rows = []
    for copula, xs in (("gaussian", [100.0, 180.0, 250.0]), ("student_t", [200.0, 300.0, 400.0])):
        model = one_factor(copula)
        for x in xs:
            t0 = time.perf_counter()
            res = credit_exceedance(model, [x], method="glasserman_li", precision=prec,
                                    seed=SEED)
            secs = time.perf_counter() - t0
            ref = (one_factor_tail(1000, 0.01, 0.2, 0.45, x) if copula == "gaussian"
                   else one_factor_t_tail(1000, 0.01, 0.2, 0.45, 5.0, x))
            rows.append(row(f"1 factor {copula}", x, res.estimates[0], ref, secs))
    het = heterogeneous()
    # Thresholds where P is near 1e-4 and 1e-6 (the one-factor guess of core.credit.measures).
    for x in (round(guess_var(het, 1 - 1e-4), -3), round(guess_var(het, 1 - 1e-6), -3)):
        t0 = time.perf_counter()
        res = credit_exceedance(het, [x], method="glasserman_li", precision=prec, seed=SEED)
        rows.append(row("10 groups, 3 factors", x, res.estimates[0], None,
                        time.perf_counter() - t0))
    print(f"P(L > x), Glasserman-Li, {n} samples, seed {SEED} (z = (est - ref) / SE)")
    show(["model", "x", "estimate", "quadrature", "rel. error", "z", "seconds"], rows)

    # No quadrature exists for the 10-group book; at P near 1e-4 crude Monte Carlo (the model
    # itself, no likelihood ratios) is an independent check of the weights and the shift.
    x4 = round(guess_var(het, 1 - 1e-4), -3)
    crude_n = 20_000 if args.quick else 4_000_000
    t0 = time.perf_counter()
    crude = credit_exceedance(het, [x4], method="crude",
                              precision=Precision(samples=crude_n), seed=SEED).estimates[0]
    twisted = credit_exceedance(het, [x4], method="glasserman_li", precision=prec,
                                seed=SEED + 1).estimates[0]
    se = math.hypot(crude.std_error or 0.0, twisted.std_error or 0.0)
    print(f"10 groups at x = {x4:g}: crude ({crude_n:,} samples) {crude.value:.4g} "
          f"[{crude.ci_low:.4g}, {crude.ci_high:.4g}] vs Glasserman-Li {twisted.value:.4g} "
          f"+- {1.96 * (twisted.std_error or 0):.2g}: z = "
          f"{(twisted.value - crude.value) / se if se else math.nan:+.2f} "
          f"({time.perf_counter() - t0:.1f} s)\n")

    t0 = time.perf_counter()
    tail = credit_tail(het, levels=[0.999], method="glasserman_li", precision=prec, seed=SEED)
    m = tail.measures[0]
    print(f"10 groups: VaR 0.999 = {m.var.value:.6g} [{m.var.ci_low:.6g}, {m.var.ci_high:.6g}] "
          f"(relative half-width {(m.var.ci_high - m.var.ci_low) / 2 / m.var.value:.3%}), "
          f"TVaR = {m.tvar.value:.6g} +- {1.96 * (m.tvar.std_error or 0):.4g}, "
          f"{time.perf_counter() - t0:.1f} s")
    total = sum(c.tvar_contribution for c in m.contributions)
    show(["group", "TVaR contribution", "95% interval"],
         [[c.label, f"{c.tvar_contribution:.5g}", f"[{c.ci_low:.5g}, {c.ci_high:.5g}]"]
          for c in m.contributions] + [["sum", f"{total:.6g}", f"TVaR {m.tvar.value:.6g}"]])

    cost = []
    for obligors in (1000, 100_000):
        model = heterogeneous(obligors)
        x = guess_var(model, 1 - 1e-6)
        t0 = time.perf_counter()
        res = credit_exceedance(model, [x], method="glasserman_li", precision=prec, seed=SEED)
        cost.append([f"{model.obligors:,}", f"{x:.4g}", f"{res.estimates[0].value:.3g}",
                     f"{(res.estimates[0].relative_error or 0):.2%}",
                     f"{time.perf_counter() - t0:.2f}"])
    print(f"Cost: 10 groups, 3 factors, {n} samples, P near 1e-6 (ratio "
          f"{float(cost[1][-1]) / float(cost[0][-1]):.2f}x)")
    show(["obligors", "x", "P(L > x)", "rel. error", "seconds"], cost)
    return 0


if __name__ == "__main__":
    sys.exit(main())
