"""Mean and standard deviation of a credit portfolio's loss, by one-dimensional quadrature.

E[L^2] needs the joint default probability of two obligors, P(Y_1 < c_g, Y_2 < c_h) with
latent correlation r = b_g' R b_h. Gaussian copula: the bivariate normal Phi_2(c_g, c_h; r)
by Plackett's (1954) identity d Phi_2 / d r = phi_2, integrated over r by Gauss-Legendre.
Student t: the same at c sqrt(w / df), averaged over W ~ chi-square(df) by generalised
Gauss-Laguerre quadrature.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special, stats

from core.credit.lgd import BetaLGD
from core.credit.lines import LineSet
from core.credit.model import CreditModel

_LEGENDRE = np.polynomial.legendre.leggauss(48)


def _phi2(a: np.ndarray, b: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Bivariate normal P(X < a, Y < b) with correlation r, elementwise (|r| < 1)."""
    nodes, weights = _LEGENDRE
    s = 0.5 * (nodes + 1.0)  # on [0, 1]: rho = s r
    rho = s[:, None] * r[None, :]
    one = 1.0 - rho * rho
    expo = -(a * a - 2.0 * rho * a * b + b * b) / (2.0 * one)
    dens = np.exp(expo) / (2.0 * math.pi * np.sqrt(one))
    out = special.ndtr(a) * special.ndtr(b) + 0.5 * r * (weights[:, None] * dens).sum(axis=0)
    return np.asarray(out, dtype=float)


def loss_moments(model: CreditModel) -> tuple[float, float]:
    """(mean, standard deviation) of the portfolio loss."""
    n = model.counts.astype(float)
    e = model.exposures
    mu = np.array([float(lg.mean) for lg in model.lgds])
    second = np.array([float(lg.mean) ** 2 + (lg.variance if isinstance(lg, BetaLGD) else 0.0)
                       for lg in model.lgds])
    bx = model.loadings_x
    r = bx @ bx.T
    g = len(model.groups)
    ii, jj = np.triu_indices(g)
    if model.copula == "student_t":
        nu = float(model.df or 1.0)
        # W = 2 y with y ~ gamma(nu / 2): generalised Gauss-Laguerre nodes for y^(nu/2 - 1) e^-y.
        y, wy = special.roots_genlaguerre(40, 0.5 * nu - 1.0)
        wy = wy / math.gamma(0.5 * nu)
        c = np.asarray(stats.t.ppf(model.pds, nu), dtype=float)
        joint = np.zeros(ii.size)
        for yk, wk in zip(y, wy, strict=True):
            s = math.sqrt(2.0 * yk / nu)
            joint += wk * _phi2(c[ii] * s, c[jj] * s, r[ii, jj])
    else:
        c = model.thresholds
        joint = _phi2(c[ii], c[jj], r[ii, jj])
    pair = np.zeros((g, g))
    pair[ii, jj] = joint
    pair[jj, ii] = joint
    mean = float((n * e * mu * model.pds).sum())
    cross = np.outer(n * e * mu, n * e * mu) - np.diag(n * (e * mu) ** 2)
    second_moment = float((n * e * e * second * model.pds).sum() + (cross * pair).sum())
    sd = math.sqrt(max(second_moment - mean * mean, 0.0))
    lines = model.line_set
    if lines is None:
        return mean, sd
    if lines.independent:  # every loading zero: the variances add
        var = sd * sd + lines.variance
    else:
        var = _with_lines(model, lines, sd * sd, n * e * mu)
    return mean + lines.mean, math.sqrt(var) if math.isfinite(var) and var >= 0 else math.nan


def _with_lines(model: CreditModel, lines: LineSet, credit_var: float,
                per_default: np.ndarray) -> float:
    """Var(credit loss + claim lines) for lines on the factors: every latent variable (an
    obligor's, a line's) is one coordinate of a gaussian (or t) vector with correlations
    b' b of their loadings on the independent factors, so Var(sum of lines) is the copula
    quadrature of core.dependence.moments (lines coupled by the correlation b_i' b_j), and
    Cov(S_i, credit loss) = sum_g n_g e_g E[LGD_g] Cov(S_i, 1{default of an obligor of g})
    (the LGDs are independent of the latent variables) by the same quadrature. NaN when the
    quadrature cannot vouch for a line's own moments (core.dependence.moments)."""
    from core.dependence.copula import Copula
    from core.dependence.marginals import with_reach
    from core.dependence.moments import dependent_std_dev, event_covariances
    from core.portfolio import Portfolio

    bl = lines.loadings_x
    corr = np.clip(bl @ bl.T, -1.0, 1.0)
    np.fill_diagonal(corr, 1.0)
    book = Portfolio(lines=[fl.line for fl in lines.lines],
                     dependence=Copula(kind=model.copula,  # type: ignore[arg-type]
                                       correlation=corr, df=model.df))
    quantiles = with_reach(lines.quantiles, 1e-15)
    sd_lines = dependent_std_dev(book, quantiles)
    if not math.isfinite(sd_lines):
        return math.nan
    cov = event_covariances(book, quantiles, bl @ model.loadings_x.T, model.thresholds,
                            model.pds)
    return credit_var + sd_lines**2 + 2.0 * float((cov @ per_default).sum())
