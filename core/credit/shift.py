"""The first step of Glasserman and Li (2005): where to move the factors.

The zero-variance density of the factors for P(L > x) is proportional to
phi(z) P(L > x | z). Glasserman and Li shift the factor mean to the mode of the
approximation phi(z) exp(F(z)), F(z) = min_theta [psi(theta; z) - theta x] the log of the
Chernoff bound of P(L > x | z). Under the t copula the mixing variable W joins the search
(the mode over (z, w) of phi(z) f_W(w) exp(F(z, w))), in the spirit of the two-step
importance sampling of Bassamboo, Juneja and Zeevi (2008) for extremal dependence (quoted from
memory: change the mixing variable's law, then twist given it): small W, a common shock that
raises every obligor's default probability, is how large losses happen there. The law W is
then drawn from (a gamma of smaller shape, core.credit.draws) is our own choice.
The optimisation is deterministic (a fixed grid start, then L-BFGS-B), so the proposal is a
function of the model and threshold only, and the same seed gives the same answer.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from core.credit.conditional import LgdTables, conditional_pd, psi, solve_theta
from core.credit.model import CreditModel


@dataclass(frozen=True)
class Shift:
    """mu: mean of the independent factors X under the proposal; w_star: the mixing
    variable's target (t copula), None for gaussian."""

    mu: np.ndarray
    w_star: float | None


def log_bound(model: CreditModel, tables: LgdTables, x: np.ndarray, w: np.ndarray | None,
              threshold: float) -> np.ndarray:
    """F = psi(theta) - theta x at the root theta (0 where no twist is needed), per point."""
    cond = conditional_pd(model, x, w)
    theta = solve_theta(model, tables, cond, threshold)
    log_m, _, _ = tables.approx(theta[:, None] * model.exposures[None, :])
    return psi(cond, model.counts.astype(float), log_m) - theta * threshold


def find_shift(model: CreditModel, threshold: float) -> Shift:
    """The mode of phi(x) [f_W(w)] exp(F(x, w)) over the independent factors x (and log w)."""
    cache = model.cache.setdefault("shift", {})
    if threshold in cache:
        found: Shift = cache[threshold]
        return found
    shift = _find_shift(model, threshold)
    cache[threshold] = shift
    return shift


def _find_shift(model: CreditModel, threshold: float) -> Shift:
    tables = LgdTables(model)
    k = model.factors
    student = model.copula == "student_t"
    nu = float(model.df or 1.0)
    if k == 0 and not student:
        return Shift(np.zeros(0), None)

    def values(v: np.ndarray) -> np.ndarray:
        """-log of the objective at each row of v (factors, then log w for the t copula)."""
        x = v[:, :k]
        w = np.exp(v[:, k]) if student else None
        val = log_bound(model, tables, x, w, threshold) - 0.5 * np.einsum("ij,ij->i", x, x)
        if w is not None:
            val = val + stats.chi2.logpdf(w, nu)
        return np.where(np.isfinite(val), -val, 1e300)

    dim = k + int(student)
    step = 1e-5

    def value_and_grad(v: np.ndarray) -> tuple[float, np.ndarray]:
        # Central differences, all 2 dim + 1 points in one vectorised call.
        pts = np.vstack([v, v + step * np.eye(dim), v - step * np.eye(dim)])
        f = values(pts)
        return float(f[0]), (f[1:dim + 1] - f[dim + 1:]) / (2 * step)

    start = _start(model, values, student, nu)
    res = optimize.minimize(value_and_grad, start, jac=True, method="L-BFGS-B",
                            options={"maxiter": 200, "ftol": 1e-12, "gtol": 1e-7})
    v = np.asarray(res.x, dtype=float)
    if not float(values(v[None, :])[0]) <= float(values(start[None, :])[0]):
        v = start
    return Shift(v[:k].copy(), math.exp(float(v[k])) if student else None)


def _start(model: CreditModel, values: Callable[[np.ndarray], np.ndarray], student: bool,
           nu: float) -> np.ndarray:
    """The best point of a line search along the direction in which the conditional mean loss
    rises fastest (every loading pulling the factors down), over a grid of W values for the
    t copula; one vectorised evaluation."""
    k = model.factors
    weights = model.counts * model.exposures * model.pds
    d = -(weights[:, None] * model.loadings_x).sum(axis=0)
    norm = float(np.linalg.norm(d))
    d = d / norm if norm > 0 else d
    lams = np.linspace(0.0, 10.0, 41) if k else np.zeros(1)
    xs = lams[:, None] * d[None, :]
    if student:
        lws = np.log(nu * np.geomspace(1e-3, 1.0, 13))
        xs = np.repeat(xs, lws.size, axis=0)
        pts = np.hstack([xs, np.tile(lws, lams.size)[:, None]])
    else:
        pts = xs
    return np.asarray(pts[int(np.argmin(values(pts)))], dtype=float)
