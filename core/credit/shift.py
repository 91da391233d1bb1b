"""The first step of Glasserman and Li (2005): where to move the factors.

The zero-variance density of the factors for P(L > x) is proportional to
phi(z) P(L > x | z). Glasserman and Li shift the factor mean to the mode of the
approximation phi(z) exp(F(z)), F(z) = min_theta [psi(theta; z) - theta x] the log of the
Chernoff bound of P(L > x | z). Under the t copula the mixing variable W joins the search
(the mode over (z, w) of phi(z) f_W(w) exp(F(z, w))), as in the two-step importance
sampling of Bassamboo, Juneja and Zeevi (2008) for extremal dependence: small W, a common
shock that raises every obligor's default probability, is how large losses happen there.
The optimisation is deterministic (a fixed start and Nelder-Mead), so the proposal is a
function of the model and threshold only, and the same seed gives the same answer.
"""

from __future__ import annotations

import math
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
    tables = LgdTables(model)
    k = model.factors
    student = model.copula == "student_t"
    nu = float(model.df or 1.0)
    if k == 0 and not student:
        return Shift(np.zeros(0), None)

    def objective(v: np.ndarray) -> float:
        x = v[:k][None, :]
        w = np.array([math.exp(v[k])]) if student else None
        val = float(log_bound(model, tables, x, w, threshold)[0]) - 0.5 * float(v[:k] @ v[:k])
        if w is not None:
            val += float(stats.chi2.logpdf(w[0], nu))
        return -val if math.isfinite(val) else 1e300

    start = _start(model, objective, student, nu)
    if k + int(student) == 1:
        res = optimize.minimize(objective, start, method="Nelder-Mead",
                                options={"xatol": 1e-6, "fatol": 1e-9, "maxiter": 400})
    else:
        res = optimize.minimize(objective, start, method="Nelder-Mead",
                                options={"xatol": 1e-5, "fatol": 1e-9, "maxiter": 2000,
                                         "adaptive": True})
    v = np.asarray(res.x, dtype=float) if res.fun <= objective(start) else start
    return Shift(v[:k].copy(), math.exp(float(v[k])) if student else None)


def _start(model: CreditModel, objective: object, student: bool, nu: float) -> np.ndarray:
    """A line search along the direction in which the conditional mean loss rises fastest
    (every loading pulling the factors down), over a grid of W values for the t copula."""
    k = model.factors
    weights = model.counts * model.exposures * model.pds
    d = -(weights[:, None] * model.loadings_x).sum(axis=0)
    norm = float(np.linalg.norm(d))
    d = d / norm if norm > 0 else d
    assert callable(objective)
    best, best_v = math.inf, np.zeros(k + int(student))
    ws = [math.log(nu)] if not student else list(np.log(nu * np.geomspace(1e-3, 1.0, 13)))
    for lw in ws:
        for lam in np.linspace(0.0, 10.0, 41) if k else [0.0]:
            v = np.concatenate([lam * d, [lw] if student else []])
            f = objective(v)
            if f < best:
                best, best_v = f, v
    return best_v
