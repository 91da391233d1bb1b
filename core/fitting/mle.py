"""Maximum-likelihood fits with the observed-information covariance.

The optimiser works on the free scale of ``core.fitting.families`` (log for positive
parameters): Nelder-Mead from a closed-form start (robust where the likelihood is -inf outside
the support), then Newton steps on finite-difference derivatives, which reach the optimum to
near machine precision. The covariance is the inverse Hessian of the negative log-likelihood
there (the observed information; Efron and Hinkley 1978), carried to the natural scale by the
delta method: Cov(theta) = J Cov(z) J with J = d theta / d z.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy import optimize

from core.errors import ParameterError
from core.fitting import hessian as fd
from core.fitting.data import Floats

_NEWTON_STEPS = 8
# A replicate refit stops when its step is below this many standard errors: the statistics
# move by far less than their own Monte Carlo spread for such a shift.
_SETTLED = 1e-3


def _halved(nll: Callable[[Floats], float], z: Floats, step: Floats, f: float,
            tries: int) -> tuple[float, float] | None:
    """The first of step, step/2, step/4, ... (``tries`` in all) that does not raise the
    objective, as (fraction taken, objective there); None when none of them does."""
    t = 1.0
    for _ in range(tries):
        trial = nll(z + t * step)
        if trial <= f:
            return t, trial
        t /= 2
    return None


def _newton(nll: Callable[[Floats], float], z: Floats, f: float) -> tuple[Floats, float]:
    """Newton steps on central-difference derivatives (steps a twentieth of each
    coordinate's natural scale), each kept only when it lowers the objective (halved up to
    30 times otherwise); stops when the Newton decrement g' H^-1 g / 2 is below 1e-10."""
    h_steps = 0.05 * fd.scales(nll, z, f)
    for _ in range(_NEWTON_STEPS):
        h = fd.plain_hessian(nll, z, h_steps, f)
        g = fd.central(nll, z, h_steps)
        try:
            step = -np.linalg.solve(h, g)
        except np.linalg.LinAlgError:
            break
        decrement = -float(g @ step)
        if not np.all(np.isfinite(step)) or decrement <= 0:
            break  # not a descent direction: the Hessian is not positive definite here
        if decrement < 2e-10:
            break
        taken = _halved(nll, z, np.asarray(step, dtype=np.float64), f, 30)
        if taken is None:
            break
        t, f = taken
        z = z + t * step
    return z, f


def minimise(nll: Callable[[Floats], float], z0: Floats, polish: bool = True,
             simplex: bool = True) -> tuple[Floats, float, bool]:
    """Free-scale optimum of ``nll`` from ``z0``; returns (z, nll(z), converged). Without
    ``polish`` (bootstrap refits from a nearby start) the Newton steps are skipped and the
    simplex stops at 1e-5 on the free scale, far below the statistics' own sensitivity.
    With ``simplex`` False (a start already near the optimum) Newton steps go first, and the
    simplex runs only when they leave a gradient that is not small."""
    z0 = np.asarray(z0, dtype=float)
    f0 = nll(z0)
    if not math.isfinite(f0):
        raise ParameterError("claims", "the starting values give the data zero likelihood")
    if not simplex:
        z, f = _newton(nll, z0, f0)
        if _settled(nll, z, f):
            return z, f, True
        z0 = z
    # A quick refit gets a bounded budget: it starts near the optimum, and a replicate that
    # needs more is an outlier whose statistic hardly depends on the last digits.
    options: dict[str, Any] = (
        {"xatol": 1e-7, "fatol": 1e-9, "maxiter": 4000} if polish
        else {"xatol": 1e-5, "fatol": 1e-7, "maxfev": 300 * z0.size})
    res = optimize.minimize(nll, z0, method="Nelder-Mead",
                            options={**options, "adaptive": z0.size > 2})
    z, f = np.asarray(res.x, dtype=float), float(res.fun)
    if polish:
        z, f = _newton(nll, z, f)
    return z, f, bool(res.success)


def _settled(nll: Callable[[Floats], float], z: Floats, f: float) -> bool:
    """The gradient times each coordinate's natural scale is below 1e-4 (the objective would
    fall by less than about 1e-8 along any coordinate)."""
    scale = fd.scales(nll, z, f)
    g = fd.central(nll, z, 0.05 * scale)
    return bool(np.all(np.isfinite(g)) and np.all(np.abs(g * scale) <= 1e-4))


def refit(nll: Callable[[Floats], float], z0: Floats, metric: Floats) -> Floats:
    """A bootstrap refit: the chord iteration from the original optimum, else the simplex."""
    steps = 1e-3 * np.sqrt(np.maximum(np.diag(metric), 1e-300))
    z = chord(nll, z0, metric, steps)
    return z if z is not None else minimise(nll, z0, polish=False)[0]


def chord(nll: Callable[[Floats], float], z0: Floats, metric: Floats,
          steps: Floats) -> Floats | None:
    """Optimum of ``nll`` near ``z0`` by quasi-Newton (BFGS) iterations whose first inverse
    Hessian is ``metric``, the inverse Hessian of a nearby problem (the original fit's, scaled
    to a bootstrap replicate's size). Each step costs one central-difference gradient.
    Returns None when it does not settle in 30 steps, so the caller can fall back."""
    z, f = z0, nll(z0)
    if not math.isfinite(f):
        return None
    inv = np.array(metric, dtype=float)
    se = np.sqrt(np.maximum(np.diag(metric), 1e-300))
    g = fd.central(nll, z, steps)
    for _ in range(30):
        if not np.all(np.isfinite(g)):
            return None
        step = -inv @ g
        taken = _halved(nll, z, step, f, 20)
        if taken is None:
            return z if np.all(np.abs(step) <= 1e-2 * se) else None
        moved = taken[0] * step
        z, f = z + moved, taken[1]
        if np.all(np.abs(moved) <= _SETTLED * se):
            return z
        g_new = fd.central(nll, z, steps)
        if not np.all(np.isfinite(g_new)):
            return None
        y = g_new - g
        sy = float(moved @ y)
        if sy > 0:  # the BFGS update of the inverse Hessian keeps it positive definite
            rho = 1.0 / sy
            left = np.eye(z.size) - rho * np.outer(moved, y)
            inv = left @ inv @ left.T + rho * np.outer(moved, moved)
        g = g_new
    return None


def covariance(nll: Callable[[Floats], float], z: Floats,
               jacobian: Floats) -> tuple[Floats | None, float, list[str]]:
    """Natural-scale covariance from the observed information at the free-scale optimum z."""
    h, gap = fd.hessian(nll, z)
    notes: list[str] = []
    if not np.all(np.isfinite(h)) or np.min(np.linalg.eigvalsh(0.5 * (h + h.T))) <= 0:
        notes.append("the observed information is not positive definite (the optimum is at "
                     "or near a boundary of the parameter space): no standard errors")
        return None, gap, notes
    cov_z = np.linalg.inv(h)
    cov = jacobian[:, None] * cov_z * jacobian[None, :]
    return 0.5 * (cov + cov.T), gap, notes


def free_covariance(cov: Floats, jacobian: Floats) -> Floats:
    """Back from the natural to the free scale: Cov(z) = J^-1 Cov(theta) J^-1."""
    return cov / jacobian[:, None] / jacobian[None, :]
