"""Dependent portfolios: the headline table of issue 14 (prints; never pass/fail).

    python -m bench.dependence [--samples 100000]

Each row: the estimate at 1e5 samples (seed 14), its relative error, the reference (where
one exists: common-factor convolution for equicorrelated amounts), the distance in standard
errors, the reliability verdict and the wall time; then the compound-line figures and the cost
ratio of a dependent request to the independent one of the same size.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import signal, stats

from core import Fixed, Gamma, Line, Lognormal, Poisson, Portfolio, Precision
from core import estimate_exceedance as exceedance
from core.dependence.copula import Copula
from core.measures import tail_estimates

SEED = 14
TIMES: dict[str, tuple[float, float]] = {}  # case -> (wall, CPU) seconds of its request


def amounts(d: int, sigma: float, r: np.ndarray) -> Portfolio:
    lines = [Line(count=Fixed(n=1), severity=Lognormal(mu=0.0, sigma=sigma)) for _ in range(d)]
    return Portfolio(lines=lines, dependence=Copula(kind="gaussian", correlation=r))


def equi(d: int, rho: float) -> np.ndarray:
    r = np.full((d, d), rho)
    np.fill_diagonal(r, 1.0)
    return r


def _power(pmf: np.ndarray, n: int) -> np.ndarray:
    """n-fold convolution by repeated squaring, mass beyond the top dropped at each step."""
    cells = pmf.size
    out = np.zeros(cells)
    out[0] = 1.0
    base = pmf
    while n:
        if n & 1:
            out = np.maximum(signal.fftconvolve(out, base)[:cells], 0.0)
        n >>= 1
        if n:
            base = np.maximum(signal.fftconvolve(base, base)[:cells], 0.0)
    return out


def _lattice(a: float, s: float, x: float, cells: int, rounding: str) -> np.ndarray:
    h = x / cells
    cdf = stats.lognorm.cdf(np.arange(cells + 1) * h, s, scale=math.exp(a))
    pmf = np.zeros(cells + 1)
    if rounding == "up":
        pmf[1:] = np.diff(cdf)
    else:
        pmf[:-1] = np.diff(cdf)
    return pmf


def conditional_tail(a: np.ndarray, s: np.ndarray, x: float, rounding: str, cells: int
                     ) -> float:
    """P(sum of independent lognormal(a_i, s_i) > x) on a lattice rounded down / up."""
    out = np.zeros(cells + 1)
    out[0] = 1.0
    pairs: dict[tuple[float, float], int] = {}
    for ai, si in zip(a, s, strict=True):
        pairs[(float(ai), float(si))] = pairs.get((float(ai), float(si)), 0) + 1
    for (ai, si), k in pairs.items():
        law = _power(_lattice(ai, si, x, cells, rounding), k)
        out = np.maximum(signal.fftconvolve(out, law)[: cells + 1], 0.0)
    return float(max(1.0 - out.sum(), 0.0))


def factor_reference(loadings: np.ndarray, sigma: float, x: float, cells: int = 8192
                     ) -> tuple[float, float]:
    """One-factor log-normal vector Y_i = sigma (b_i V + sqrt(1 - b_i^2) e_i): condition on
    V, then the independent sum by numerical convolution with claims rounded down / up (an
    independent deterministic method), integrated over V by the trapezoid rule."""
    v = np.linspace(-7.0, 9.0, 161)
    spread = sigma * np.sqrt(1.0 - loadings**2)
    out = []
    for rounding in ("down", "up"):
        tail = np.array([conditional_tail(sigma * loadings * t, spread, x, rounding, cells)
                         for t in v])
        out.append(float(np.trapezoid(stats.norm.pdf(v) * tail, v)))
    return out[0], out[1]


def row(name: str, pf: Portfolio, x: float, samples: int, ref: tuple[float, float] | None
        ) -> list[str]:
    t, c = time.monotonic(), time.process_time()
    res = exceedance(pf, [x], precision=Precision(samples=samples), seed=SEED)
    e = res.estimates[0]
    dt = time.monotonic() - t
    TIMES[name] = (dt, time.process_time() - c)  # CPU time too: the machine may be shared
    se = e.std_error or math.nan
    dist = "-"
    if ref is not None:
        mid = 0.5 * (ref[0] + ref[1])
        off = 0.0 if ref[0] <= e.value <= ref[1] else min(abs(e.value - ref[0]),
                                                          abs(e.value - ref[1]))
        dist = f"{off / se:.2f} (ref {mid:.4g} +-{0.5 * (ref[1] - ref[0]) / mid:.1%})"
    return [name, f"{x:g}", f"{e.value:.4g}", f"{(e.relative_error or math.nan):.2%}", dist,
            str(e.diagnostics.reliable), res.method, f"{dt:.1f}s"]


def print_table(header: list[str], rows: list[list[str]]) -> None:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)))
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=100_000)
    ap.add_argument("--quick", action="store_true", help="one row per block (smoke test)")
    args = ap.parse_args()
    n = args.samples
    rows = []
    # thresholds chosen so that P is near 1e-4, 1e-8, 1e-12
    cases = [(10, 0.5, [170.0, 830.0, 2500.0]), (10, 0.9, [500.0, 2200.0, 9000.0])]
    for d, rho, xs in cases:
        b = np.full(d, math.sqrt(rho))
        for x in xs[:1] if args.quick else xs:
            rows.append(row(f"{d} LN(0,1) rho {rho}", amounts(d, 1.0, equi(d, rho)), x, n,
                            None if args.quick else factor_reference(b, 1.0, x)))
    b20 = np.random.default_rng(20).uniform(0.3, 0.9, size=20)
    r20 = np.outer(b20, b20)
    np.fill_diagonal(r20, 1.0)  # one-factor matrix with unequal loadings: valid, not equi
    for x in ([220.0] if args.quick else [220.0, 1100.0, 2400.0]):
        rows.append(row("20 LN(0,1) one-factor", amounts(20, 1.0, r20), x, n,
                        None if args.quick else factor_reference(b20, 1.0, x)))
    pf100 = amounts(100, 0.25, equi(100, 0.3))
    x100 = pf100.mean + 5.0 * math.sqrt(lognormal_variance(100, 0.25, 0.3))
    rows.append(row("100 LN(0,0.25) rho 0.3 (5 sd)", pf100, x100, n,
                    None if args.quick else factor_reference(np.full(100, math.sqrt(0.3)),
                                                             0.25, x100, cells=1 << 17)))
    print_table(["case", "x", "P", "rel.err", "SE off ref", "reliable", "method", "time"], rows)
    compound(n, args.quick)


def lognormal_variance(d: int, s: float, rho: float) -> float:
    ex = math.exp(0.5 * s * s)
    return d * ex**2 * math.expm1(s * s) + d * (d - 1) * ex**2 * math.expm1(rho * s * s)


def compound(n: int, quick: bool) -> None:
    lines = [Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=1.5), label="storm"),
             Line(count=Poisson(mean=20.0), severity=Gamma(shape=2.0, scale=1.0), label="motor")]
    r = np.array([[1.0, 0.6], [0.6, 1.0]])
    rows = []
    for name, cop in [("gaussian 0.6", Copula(kind="gaussian", correlation=r)),
                      ("student_t df 4", Copula(kind="student_t", correlation=r, df=4.0))]:
        pf = Portfolio(lines=lines, dependence=cop)
        rows.append(row(f"2 lines {name}", pf, 1500.0, n, None))
        if quick:
            break
    t, c = time.monotonic(), time.process_time()
    ind = exceedance(Portfolio(lines=lines), [1500.0], precision=Precision(samples=n),
                     seed=SEED)
    t_ind, c_ind = time.monotonic() - t, time.process_time() - c
    rows.append(["2 lines independent", "1500", f"{ind.estimates[0].value:.4g}",
                 f"{(ind.estimates[0].relative_error or math.nan):.2%}", "-",
                 str(ind.estimates[0].diagnostics.reliable), ind.method, f"{t_ind:.1f}s"])
    print()
    print_table(["case", "x", "P", "rel.err", "SE off ref", "reliable", "method", "time"], rows)
    pf = Portfolio(lines=lines, dependence=Copula(kind="gaussian", correlation=r))
    t, c = time.monotonic(), time.process_time()
    res = tail_estimates(pf, levels=[0.995], precision=Precision(samples=n), seed=SEED)
    t_dep, c_dep = time.monotonic() - t, time.process_time() - c
    t, c = time.monotonic(), time.process_time()
    tail_estimates(Portfolio(lines=lines), levels=[0.995], precision=Precision(samples=n),
                   seed=SEED)
    t_ind2, c_ind2 = time.monotonic() - t, time.process_time() - c
    m = res.measures[0]
    total = sum(c.tvar_contribution for c in m.contributions)
    print()
    print(f"VaR 0.995 {m.var.value:.5g} [{m.var.ci_low:.5g}, {m.var.ci_high:.5g}] relative "
          f"half-width {0.5 * (m.var.ci_high - m.var.ci_low) / m.var.value:.3%}; TVaR "
          f"{m.tvar.value:.5g}; contributions "
          + ", ".join(f"{c.label} {c.tvar_contribution:.5g}" for c in m.contributions)
          + f"; |sum - TVaR| / TVaR = {abs(total - m.tvar.value) / m.tvar.value:.1e}")
    t_exc, c_exc = TIMES["2 lines gaussian 0.6"]
    print(f"cost: dependent exceedance {t_exc:.1f}s vs independent {t_ind:.1f}s (ratio "
          f"{t_exc / t_ind:.2f}); CPU {c_exc:.2f}s vs {c_ind:.2f}s (ratio {c_exc / c_ind:.2f})")
    print(f"cost: dependent risk measures {t_dep:.1f}s vs independent {t_ind2:.1f}s "
          f"(ratio {t_dep / t_ind2:.2f}); CPU {c_dep:.2f}s vs {c_ind2:.2f}s "
          f"(ratio {c_dep / c_ind2:.2f})")


if __name__ == "__main__":
    main()
