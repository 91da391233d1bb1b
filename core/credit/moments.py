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
    # Claim lines on the factors: independent of the credit loss (and of each other) only
    # when every loading is zero; the covariances otherwise are not computed (unknown, NaN).
    var = sd * sd + lines.variance
    return mean + lines.mean, math.sqrt(var) if lines.independent and math.isfinite(
        var) else math.nan
