"""The standard deviation of S for copula-coupled lines: Var S = sum Var S_i + 2 sum Cov.

Each line's variance is its compound formula (exact); a covariance is E[S_i S_j] - E S_i E S_j
with E[S_i S_j] = E[q_i(U_i) q_j(U_j)] by quadrature over the copula's latent pair (the
trapezoid rule on sinh-spaced nodes, outer in T_i, inner in T_j given T_i). The quantiles q are
the lattice midpoints (core.dependence.marginals), with one lattice added per compound line
that reaches its 1e-15 tail (`marginals.with_reach`).

The same rule must first reproduce every line's own mean and second moment (known exactly) to
REPRODUCE; when it does not (a tail too heavy for the lattice's reach, or a variance that is
infinite), the standard deviation is reported as unknown (NaN) rather than as a wrong number.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

from core.dependence.marginals import LineQuantile, with_reach
from core.portfolio import Portfolio

FloatArray = npt.NDArray[np.float64]
REPRODUCE = 1e-3  # relative agreement of the quadrature with each line's exact moments
# Trapezoid nodes t = sinh(y): dense near 0, reaching |t| = 1.6e6 (a student_t tail there is
# below 1e-24) with few points.
_OUTER = np.linspace(-15.0, 15.0, 3001)
_INNER = np.linspace(-15.0, 15.0, 601)


def _mid(q: LineQuantile, ubar: FloatArray) -> FloatArray:
    lo, hi = q.bounds(ubar)
    return np.where(np.isfinite(hi), 0.5 * (lo + hi), lo)


def _rule(y: FloatArray, df: float | None) -> tuple[FloatArray, FloatArray]:
    """Nodes t = sinh(y) and trapezoid weights of the standard normal (df None) or t law."""
    t = np.sinh(y)
    dy = np.diff(y)
    trap = np.concatenate([[dy[0]], dy[:-1] + dy[1:], [dy[-1]]]) * 0.5 * np.cosh(y)
    dens = np.exp(-0.5 * t * t) / math.sqrt(2.0 * math.pi) if df is None else np.exp(
        special.gammaln(0.5 * (df + 1)) - special.gammaln(0.5 * df)
        - 0.5 * math.log(df * math.pi) - 0.5 * (df + 1) * np.log1p(t * t / df))
    return t, trap * dens


def _nonzero(t: FloatArray, w: FloatArray) -> tuple[FloatArray, FloatArray]:
    """The nodes whose weight is not 0: the normal density underflows beyond |t| ~ 38, so
    most of the sinh nodes (spaced for the t law's tail) add exact zeros to the gaussian sums;
    leaving them out skips most of the quantile look-ups (the sum is unchanged: the quantiles
    are finite)."""
    keep = w > 0
    return t[keep], w[keep]


def _ubar(x: FloatArray, df: float | None) -> FloatArray:
    return np.asarray(special.ndtr(-x) if df is None else special.stdtr(df, -x), dtype=float)


def dependent_std_dev(portfolio: Portfolio, quantiles: tuple[LineQuantile, ...]) -> float:
    """sqrt(Var S) for the portfolio's copula, or NaN when the quadrature cannot vouch for it.

    Outer: T_i over its law (normal, or t with df); inner: T_j given T_i, which is normal with
    mean r T_i and variance 1 - r^2, or for student_t the t law with df + 1 scaled by
    sqrt((df + T_i^2)(1 - r^2)/(df + 1)) about r T_i (the conditional multivariate t)."""
    cop = portfolio.dependence
    assert cop is not None
    lines = portfolio.lines
    var = [line.variance for line in lines]
    if not all(math.isfinite(v) for v in var):
        return math.nan
    df = cop.df if cop.kind == "student_t" else None
    quantiles = with_reach(quantiles, 1e-15)
    t, w = _nonzero(*_rule(_OUTER, df))
    v, wv = _nonzero(*_rule(_INNER, None if df is None else df + 1.0))
    # Inner nodes in decreasing order, so that each row's ubar = P(T > t) increases and the
    # lattice lookup (a sorted search, which starts from the previous key's place) runs fast.
    v, wv = v[::-1], wv[::-1]
    own = [_mid(q, _ubar(t, df)) for q in quantiles]
    for i, line in enumerate(lines):
        exact2 = line.variance + line.mean**2
        first, second = float(own[i] @ w), float(own[i] ** 2 @ w)
        if not (abs(first - line.mean) <= REPRODUCE * max(line.mean, 1e-300)
                and abs(second - exact2) <= REPRODUCE * max(exact2, 1e-300)):
            return math.nan
    total = math.fsum(var)
    r = cop.correlation
    for i in range(len(lines)):
        for j in range(i + 1, len(lines)):
            rho = float(r[i, j])
            spread = math.sqrt(max(1.0 - rho * rho, 0.0))
            scale = spread if df is None else spread * np.sqrt((df + t * t) / (df + 1.0))
            t_j = rho * t[:, None] + np.asarray(scale).reshape(-1, 1) * v[None, :]
            q_j = _mid(quantiles[j], _ubar(t_j, df).ravel()).reshape(t_j.shape)
            cross = float((own[i] * w) @ (q_j @ wv))
            total += 2.0 * (cross - lines[i].mean * lines[j].mean)
    return math.sqrt(total) if total >= 0 else math.nan


def event_covariances(portfolio: Portfolio, quantiles: tuple[LineQuantile, ...],
                      r: FloatArray, c: FloatArray, p: FloatArray) -> FloatArray:
    """(m, G) Cov(S_i, 1{Y_g < c_g}) for events on latent variables Y_g (an obligor's default,
    core.credit) of probability p_g whose correlation with line i's latent is r[i, g]; a line
    loses most when its latent is low, so with T_i = -Y_i as above, 1{Y_g < c_g} is the event
    T_g > -c_g, and given T_i = t it has probability Phi((c_g + r t) / sqrt(1 - r^2)) (the
    conditional normal), or for student_t the t law with df + 1 at (c_g + r t) over the
    conditional scale. The quadrature is the outer rule of `dependent_std_dev`, and the
    covariance is sum_t w q(t) (P(event | t) - p), which is 0 when r = 0 as it must be.
    `quantiles` must reach the lines' far tails (`with_reach`), as `dependent_std_dev`
    checks on the lines' own moments."""
    cop = portfolio.dependence
    assert cop is not None
    df = cop.df if cop.kind == "student_t" else None
    t, w = _nonzero(*_rule(_OUTER, df))
    out = np.zeros((len(quantiles), c.size))
    for i, q in enumerate(quantiles):
        mid = _mid(q, _ubar(t, df)) * w
        rho = np.clip(r[i], -1.0, 1.0)[:, None]
        spread = np.sqrt(np.maximum(1.0 - rho * rho, 1e-300))
        z = c[:, None] + rho * t[None, :]
        if df is None:
            cond = special.ndtr(z / spread)
        else:
            cond = special.stdtr(df + 1.0, z / (spread * np.sqrt((df + t * t) / (df + 1.0))))
        out[i] = (np.asarray(cond, dtype=float) - p[:, None]) @ mid
    return out
