"""Deterministic references for the coverage study, written from scipy alone (no engine code).

Each reference is P(S > x) for a compound sum of iid claims, computed by the identity of
Asmussen and Kroese (2006): P(S > x) = E[N] E[Fbar(max(M', x - S'))], where S' and M' are the
sum and the largest of the other claims, whose count is the size-biased count minus one
(fixed n: n - 1; negative binomial (r, beta): negative binomial (r + 1, beta)). Split at
S' = x / 2:

- S' <= x / 2: then M' <= S' <= x - S', so the integrand is exactly Fbar(x - S'). The law of
  S' comes from an FFT of its characteristic function on a uniform grid (claims discretised by
  local moment matching, Gerber 1982, which keeps every claim's mean: the error in E[g(S')]
  for a smooth g is then of second order in the cell width).
- S' > x / 2 needs one large claim among the others (two would put the sample in a region of
  order Fbar(x/4)^2 smaller). Given that claim y and the rest r (the law of S'' with one claim
  fewer, again by FFT), the integrand is Fbar(max(y, x - y - r)); it is summed over a fine
  grid of y in [x / 8, x] and the grid of r.

Accuracy is checked in the study itself by halving the cell width (the change is printed).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

Sf = Callable[[np.ndarray], np.ndarray]


def _cell_masses(cdf: Callable[[np.ndarray], np.ndarray], h: float, cells: int,
                 ppf_mean: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> np.ndarray:
    """Local moment matching: the mass of [k h, (k + 1) h] goes to k h and (k + 1) h in the
    proportions that keep its mean; `ppf_mean(a, b)` is E[X; a < X <= b]."""
    edges = np.arange(cells + 1) * h
    mass = np.diff(cdf(edges))
    partial = ppf_mean(edges[:-1], edges[1:])
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(mass > 0, (partial / np.where(mass > 0, mass, 1.0) - edges[:-1]) / h,
                        0.5)
    frac = np.clip(frac, 0.0, 1.0)
    pmf = np.zeros(cells + 1)
    pmf[:-1] += mass * (1 - frac)
    pmf[1:] += mass * frac
    return pmf


def partial_mean(dist: stats.rv_continuous) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """E[X; a < X <= b] by Gauss-Legendre quadrature on each cell (20 nodes), with the cell
    mass used to anchor it; exact enough for cells where the density is smooth or integrable."""
    nodes, weights = np.polynomial.legendre.leggauss(20)

    def fn(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        # E[X; a<X<=b] = b F(b) - a F(a) - int_a^b F(t) dt
        mid, half = 0.5 * (a + b), 0.5 * (b - a)
        t = mid[:, None] + half[:, None] * nodes[None, :]
        integral = (dist.cdf(t) * weights[None, :]).sum(axis=1) * half
        return np.asarray(b * dist.cdf(b) - a * dist.cdf(a) - integral)

    return fn


def compound_pmf(claim_pmf: np.ndarray, size: int, count: str, n: float,
                 beta: float = 0.0) -> np.ndarray:
    """pmf on the grid of a sum of `n` claims (count 'fixed') or of a negative binomial
    (r = n, beta) count of claims, by FFT of size `size` (wrap-around mass is what lies
    beyond size cells)."""
    phi = np.fft.rfft(claim_pmf, size)
    if count == "fixed":
        out = phi ** int(n)
    else:
        out = (1.0 + beta * (1.0 - phi)) ** (-n)
    return np.maximum(np.fft.irfft(out, size), 0.0)


def ak_reference(dist: stats.rv_continuous, x: float, h: float, count: str, n: float,
                 beta: float = 0.0) -> float:
    """P(S > x) for n fixed claims (count 'fixed') or a negative binomial (r = n, beta) count,
    claims with law `dist` (a frozen scipy distribution on (0, inf))."""
    if count == "fixed":
        mean_n, others, rest = float(n), ("fixed", n - 1), ("fixed", n - 2)
        rest_mean = n - 1.0
    else:
        mean_n, others, rest = n * beta, ("nb", n + 1), ("nb", n + 2)
        rest_mean = (n + 1) * beta
    half = x / 2.0
    cells = math.ceil(half / h) + 1
    size = 1 << math.ceil(math.log2(4 * cells))
    claim = _cell_masses(dist.cdf, h, size // 2 - 1, partial_mean(dist))
    s = np.arange(size) * h
    law = compound_pmf(claim, size, others[0], others[1], beta)
    inside = s <= half
    main = float(law[inside] @ dist.sf(x - s[inside]))
    # One large claim y among the others, the rest r from the law with one claim fewer.
    law_rest = compound_pmf(claim, size, rest[0], rest[1], beta)
    y_edges = np.geomspace(x / 8.0, 4.0 * x, 4_001)
    y_mass = -np.diff(dist.sf(y_edges))
    y = np.sqrt(y_edges[:-1] * y_edges[1:])
    # The rest's law on bins of x / 4000: the integrand's relative change across a bin is the
    # hazard rate times the bin (below 1e-2 here), so the midpoint error is of order 1e-5 of
    # this term, itself a small share of the total.
    width = max(1, int(x / 4000.0 / h))
    bins = -(-size // width)
    q = np.add.reduceat(law_rest, np.arange(0, size, width))
    r = (np.arange(bins) * width + 0.5 * (width - 1)) * h
    keep = q > 1e-300
    r, q = r[keep], q[keep]
    big = 0.0
    for lo in range(0, y.size, 500):
        yy = y[lo:lo + 500, None]
        arg = np.maximum(yy, x - yy - r[None, :])
        region = (yy + r[None, :]) > half
        big += float(y_mass[lo:lo + 500] @ ((dist.sf(arg) * region) @ q))
    return mean_n * (main + rest_mean * big)


def fixed_weibull(shape: float, n: int, x: float, h: float) -> float:
    return ak_reference(stats.weibull_min(shape), x, h, "fixed", n)


def nb_lognormal(mean: float, dispersion: float, mu: float, sigma: float, x: float,
                 h: float) -> float:
    beta = dispersion - 1.0
    r = mean / beta
    return ak_reference(stats.lognorm(sigma, scale=math.exp(mu)), x, h, "nb", r, beta)


def fixed_lognormal_tail(n: int, mu: float, sigma: float, x: float, h: float) -> float:
    """P(S_n > x) = E[Fbar(x - S_{n-1})] (Fbar = 1 below 0), the law of S_{n-1} by FFT:
    the integrand is smooth except for the kink at S_{n-1} = x, where S_{n-1} has little
    mass, so the error is of second order in h."""
    dist = stats.lognorm(sigma, scale=math.exp(mu))
    cells = math.ceil(4 * x / h)
    size = 1 << math.ceil(math.log2(2 * cells))
    claim = _cell_masses(dist.cdf, h, size // 2 - 1, partial_mean(dist))
    law = compound_pmf(claim, size, "fixed", n - 1)
    s = np.arange(size) * h
    tail = np.where(s < x, dist.sf(np.maximum(x - s, 0.0)), 1.0)
    return float(law @ tail) + float((n - 1) * dist.sf(size // 2 * h))


def poisson_sum_bounds(lam: float, dist: stats.rv_continuous, v: float, eps: float
                       ) -> tuple[float, float]:
    """Rigorous (lower, upper) bounds of P(S > v) for a compound Poisson(lam) sum of claims
    >= 0 with law `dist`, from Poisson thinning alone (scipy, no engine code).

    Claims above t = eps v are a Poisson(lam s) count, s = sf(t), independent of the rest, whose
    count is Poisson(lam (1 - s)). Lower: P(S > v) >= P(some claim > v) = 1 - exp(-lam sf(v)).
    Upper: with no claim above t, S > v needs more than 1/eps small claims; with exactly one
    big claim Y and k small ones, S > v needs Y > v - k t; two or more big claims: bound 1.
    """
    s = float(dist.sf(eps * v))
    small = lam * (1.0 - s)
    lower = -math.expm1(-lam * float(dist.sf(v)))
    k = np.arange(0, int(1.0 / eps) + 1)
    one_big = lam * math.exp(-lam * s) * float(
        stats.poisson.pmf(k, small) @ dist.sf(np.maximum(v - k * eps * v, eps * v)))
    none_big = math.exp(-lam * s) * float(stats.poisson.sf(int(1.0 / eps), small))
    two_big = -math.expm1(-lam * s) - lam * s * math.exp(-lam * s)
    return lower, min(1.0, none_big + one_big + two_big)


def poisson_var_bracket(lam: float, dist: stats.rv_continuous, level: float, lo: float,
                        hi: float, eps: float = 0.005) -> tuple[float, float]:
    """(a, b) with a < VaR_level(S) <= b from poisson_sum_bounds, by bisection in log v:
    a has lower bound > 1 - level (so VaR > a), b has upper bound <= 1 - level."""
    tail = 1.0 - level

    def search(side: int) -> float:
        a, b = math.log(lo), math.log(hi)
        for _ in range(100):
            mid = 0.5 * (a + b)
            if poisson_sum_bounds(lam, dist, math.exp(mid), eps)[side] > tail:
                a = mid
            else:
                b = mid
        return math.exp(a if side == 0 else b)

    return search(0), search(1)
