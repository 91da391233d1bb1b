"""Deterministic references for the credit checks (scipy quadrature and exact convolution),
independent of the engine's samplers."""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate, special, stats


def one_factor_tail(n: int, pd: float, rho: float, lgd: float, x: float) -> float:
    """P(L > x) for n obligors of exposure 1 on one gaussian factor: the integral over the
    factor of binomial tails (Vasicek's conditional independence; scipy.integrate.quad and
    scipy.stats.binom)."""
    k = math.floor(x / lgd + 1e-9)
    c = stats.norm.ppf(pd)

    def f(z: float) -> float:
        p = stats.norm.cdf((c - math.sqrt(rho) * z) / math.sqrt(1.0 - rho))
        return float(stats.norm.pdf(z) * stats.binom.sf(k, n, p))

    return float(integrate.quad(f, -12, 12, points=[-6, -4, -3, -2, 0], limit=400,
                                epsabs=0, epsrel=1e-10)[0])


def one_factor_t_tail(n: int, pd: float, rho: float, lgd: float, nu: float, x: float) -> float:
    """The same under the t copula: an outer Gauss-Legendre rule in log W (W chi-square(nu))
    over an adaptive inner integral in the factor (scipy.integrate.quad_vec)."""
    k = math.floor(x / lgd + 1e-9)
    c = stats.t.ppf(pd, nu)
    nodes, weights = special.roots_legendre(160)
    lo, hi = math.log(1e-7), math.log(300.0)
    lw = 0.5 * (hi - lo) * nodes + 0.5 * (hi + lo)
    w = np.exp(lw)

    def f(z: float) -> np.ndarray:
        p = stats.norm.cdf((c * np.sqrt(w / nu) - math.sqrt(rho) * z) / math.sqrt(1.0 - rho))
        return np.asarray(stats.norm.pdf(z) * stats.binom.sf(k, n, p))

    inner = integrate.quad_vec(f, -12, 12, points=[-6, -4, -3, -2, 0], epsabs=0,
                               epsrel=1e-9, limit=400)[0]
    dens = stats.chi2.pdf(w, nu) * w  # density of log W
    return float(0.5 * (hi - lo) * np.sum(weights * dens * inner))


def vasicek_tail(pd: float, rho: float, y: float) -> float:
    """Vasicek (1987, 2002) large-pool limit: P(loss fraction > y) =
    Phi((Phi^{-1}(PD) - sqrt(1 - rho) Phi^{-1}(y)) / sqrt(rho))."""
    return float(stats.norm.cdf((stats.norm.ppf(pd) - math.sqrt(1 - rho) * stats.norm.ppf(y))
                                / math.sqrt(rho)))


def independent_lattice_pmf(counts: list[int], units: list[int], pds: list[float]) -> np.ndarray:
    """Exact law of sum_g units_g * D_g with independent D_g ~ binomial(counts_g, pds_g), on
    the integers, by direct convolution (zero loadings: independent Bernoulli sums)."""
    pmf = np.array([1.0])
    for n, u, p in zip(counts, units, pds, strict=True):
        part = np.zeros(n * u + 1)
        part[::u] = stats.binom.pmf(np.arange(n + 1), n, p)
        pmf = np.convolve(pmf, part)
    return pmf


def two_group_tail(groups: list[tuple[int, float, float, np.ndarray]], corr: np.ndarray,
                   lgd: float, x: float) -> float:
    """P(L > x) for two groups (count, exposure, PD, loadings on two correlated gaussian
    factors): given the factors the loss is e1 c D1 + e2 c D2 with independent binomials,
    summed exactly over D1; the factors integrated by scipy.integrate.dblquad."""
    a = np.linalg.cholesky(corr)
    (n1, e1, p1, b1), (n2, e2, p2, b2) = groups
    bx1, bx2 = a.T @ b1, a.T @ b2
    s1, s2 = math.sqrt(1 - bx1 @ bx1), math.sqrt(1 - bx2 @ bx2)
    c1, c2 = stats.norm.ppf(p1), stats.norm.ppf(p2)
    d1 = np.arange(n1 + 1)

    log_choose = (special.gammaln(n1 + 1) - special.gammaln(d1 + 1)
                  - special.gammaln(n1 - d1 + 1))
    k2 = np.floor((x - e1 * lgd * d1) / (e2 * lgd) + 1e-9)

    def f(y: float, z: float) -> float:
        # scipy.special forms of scipy.stats.norm.cdf / binom.pmf / binom.sf (bdtrc), for speed.
        x_ = np.array([z, y])
        q1 = special.ndtr((c1 - bx1 @ x_) / s1)
        q2 = special.ndtr((c2 - bx2 @ x_) / s2)
        pmf1 = np.exp(log_choose + d1 * math.log(q1) + (n1 - d1) * math.log1p(-q1))
        tail = np.where(k2 < 0, 1.0, special.bdtrc(np.maximum(k2, 0), n2, q2))
        return float(math.exp(-0.5 * (z * z + y * y)) / (2 * math.pi) * np.sum(pmf1 * tail))

    return float(integrate.dblquad(f, -9, 9, -9, 9, epsabs=0, epsrel=1e-6)[0])


def poisson_gamma_sf(lam: float, shape: float, scale: float, y: np.ndarray) -> np.ndarray:
    """P(S > y) for S a Poisson(lam) sum of gamma(shape, scale) claims: the series over the
    claim count of gamma tails (a sum of n gamma claims is gamma(n shape); scipy.stats)."""
    y = np.atleast_1d(np.asarray(y, dtype=float))
    n = np.arange(1, int(lam + 40 * math.sqrt(lam) + 40))
    w = stats.poisson.pmf(n, lam)
    out = np.ones_like(y)
    pos = y >= 0
    out[pos] = (w[None, :] * stats.gamma.sf(y[pos, None], n[None, :] * shape,
                                            scale=scale)).sum(axis=1)
    return out


def mixed_one_factor_tail(n: int, pd: float, rho: float, lgd: float, lam: float,
                          shape: float, scale: float, b: float, x: float) -> float:
    """P(L + S > x) for n obligors of exposure 1 (loading sqrt(rho), defaults when the latent
    is below Phi^{-1}(pd)) beside a Poisson-gamma line whose latent Y = b Z + sqrt(1 - b^2) e
    (the same factor Z; adverse when low like an obligor's) is mapped to its loss by the
    exact compound quantile F^{-1}(Phi(-Y)): given Z the defaults are binomial and
    S > x - k lgd iff -Y exceeds Phi^{-1}(F(x - k lgd)), a normal tail; integrated over Z
    (scipy.integrate.quad). b = 0 makes the line independent: the convolution of the credit
    loss law with the compound law."""
    k = np.arange(n + 1)
    c = stats.norm.ppf(pd)
    f_line = np.clip(1.0 - poisson_gamma_sf(lam, shape, scale, x - k * lgd), 0.0, 1.0)
    level = stats.norm.ppf(f_line)

    def f(z: float) -> float:
        p = stats.norm.cdf((c - math.sqrt(rho) * z) / math.sqrt(1.0 - rho))
        cond = stats.norm.sf((level + b * z) / math.sqrt(1.0 - b * b))
        return float((stats.binom.pmf(k, n, p) * cond).sum() * stats.norm.pdf(z))

    return float(integrate.quad(f, -9, 9, limit=400, epsabs=0, epsrel=1e-9)[0])


def mixed_one_factor_moments(n: int, pd: float, rho: float, lgd: float, lam: float,
                             shape: float, scale: float, b: float) -> tuple[float, float]:
    """(mean, sd) of L + S for the book of mixed_one_factor_tail, by conditioning on the
    factor Z: given Z the defaults are binomial(n, p(Z)) and independent of the line, whose
    conditional tail is P(S > y | Z) = Phi(-(Phi^{-1}(F(y)) + b Z) / sqrt(1 - b^2)) with F the
    exact compound law (poisson_gamma_sf); E[S^k | Z] = int k y^(k-1) P(S > y | Z) dy (Simpson
    on a fine grid), then E[(L + S)^2] = E_Z[Var(L|Z) + (E[L|Z] + E[S|Z])^2 - E[S|Z]^2 +
    E[S^2|Z]] by scipy.integrate.quad over Z."""
    from scipy import integrate as _int

    y = np.linspace(0.0, 1500.0, 15001)
    level = stats.norm.ppf(np.clip(1.0 - poisson_gamma_sf(lam, shape, scale, y), 0.0, 1.0))
    c = stats.norm.ppf(pd)
    s = math.sqrt(1.0 - b * b)

    def parts(z: float) -> tuple[float, float, float, float]:
        p = float(stats.norm.cdf((c - math.sqrt(rho) * z) / math.sqrt(1.0 - rho)))
        tail = stats.norm.sf((level + b * z) / s)
        s1 = float(_int.simpson(tail, x=y))
        s2 = float(_int.simpson(2.0 * y * tail, x=y))
        return n * lgd * p, n * lgd * lgd * p * (1.0 - p), s1, s2

    def moment(k: int) -> float:
        def f(z: float) -> float:
            el, vl, s1, s2 = parts(z)
            val = el + s1 if k == 1 else vl + (el + s1) ** 2 - s1 * s1 + s2
            return float(val * stats.norm.pdf(z))

        return float(_int.quad(f, -9, 9, limit=200, epsabs=0, epsrel=1e-10)[0])

    m1 = moment(1)
    return m1, math.sqrt(moment(2) - m1 * m1)
