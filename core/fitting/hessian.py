"""Finite-difference derivatives of a smooth scalar function, with the step set by the
function's own curvature.

The steps are a fixed fraction of each coordinate's natural scale, 1/sqrt(d2f/dz2) (for a
negative log-likelihood: a fraction of that parameter's standard error), found from a first
pilot difference. Second differences at steps h and 2h are combined by Richardson
extrapolation, which cancels the h^2 term of the central-difference error, and their gap is
returned as an error estimate.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from core.fitting.data import Floats

_FRACTION = 0.05  # of a standard error: f moves by about 1e-3, far above rounding
_PILOT = 1e-3


def _second(f: Callable[[Floats], float], z: Floats, h: Floats, f0: float) -> Floats:
    k = z.size
    hess = np.empty((k, k))
    eye = np.eye(k)
    for i in range(k):
        up, down = f(z + h[i] * eye[i]), f(z - h[i] * eye[i])
        hess[i, i] = (up - 2.0 * f0 + down) / h[i] ** 2
        for j in range(i):
            a, b = h[i] * eye[i], h[j] * eye[j]
            hess[i, j] = hess[j, i] = (
                f(z + a + b) - f(z + a - b) - f(z - a + b) + f(z - a - b)
            ) / (4.0 * h[i] * h[j])
    return hess


def scales(f: Callable[[Floats], float], z: Floats, f0: float) -> Floats:
    """Natural step scale of each coordinate, 1/sqrt(curvature), from a pilot difference."""
    out = np.empty(z.size)
    for i in range(z.size):
        h = _PILOT * max(1.0, abs(float(z[i])))
        e = np.zeros(z.size)
        e[i] = h
        curv = (f(z + e) - 2.0 * f0 + f(z - e)) / h**2
        out[i] = 1.0 / math.sqrt(curv) if math.isfinite(curv) and curv > 0 else h
    return out


def hessian(f: Callable[[Floats], float], z: Floats) -> tuple[Floats, float]:
    """Hessian of ``f`` at ``z`` and the largest relative gap between the h and 2h estimates.
    A step that leaves the domain (f = inf) is halved until it does not."""
    z = np.asarray(z, dtype=float)
    f0 = f(z)
    h = _FRACTION * scales(f, z, f0)
    with np.errstate(invalid="ignore"):  # inf - inf where a step left the domain
        for _ in range(20):
            fine, coarse = _second(f, z, h, f0), _second(f, z, 2.0 * h, f0)
            if np.all(np.isfinite(fine)) and np.all(np.isfinite(coarse)):
                break
            h = h / 2.0
        best = (4.0 * fine - coarse) / 3.0
        size = max(float(np.max(np.abs(best))), 1e-300)
        return best, float(np.max(np.abs(fine - coarse))) / size


def gradient(f: Callable[[Floats], float], z: Floats, h: Floats) -> Floats:
    """Central-difference gradient with Richardson extrapolation (steps h and 2h)."""
    g = np.empty(z.size)
    for i in range(z.size):
        e = np.zeros(z.size)
        e[i] = h[i]
        d1 = (f(z + e) - f(z - e)) / (2.0 * h[i])
        d2 = (f(z + 2 * e) - f(z - 2 * e)) / (4.0 * h[i])
        g[i] = (4.0 * d1 - d2) / 3.0
    return g


def central(f: Callable[[Floats], float], z: Floats, h: Floats) -> Floats:
    """Central-difference gradient (2 evaluations per coordinate); one-sided where a step
    leaves the domain (f = inf there, e.g. a bounded support crossing a claim)."""
    g = np.empty(z.size)
    f0: float | None = None
    for i in range(z.size):
        e = np.zeros(z.size)
        e[i] = h[i]
        up, down = f(z + e), f(z - e)
        if math.isfinite(up) and math.isfinite(down):
            g[i] = (up - down) / (2.0 * h[i])
            continue
        f0 = f(z) if f0 is None else f0
        g[i] = (up - f0) / h[i] if math.isfinite(up) else (f0 - down) / h[i]
    return g


def plain_hessian(f: Callable[[Floats], float], z: Floats, h: Floats, f0: float) -> Floats:
    """Central second differences at steps h, no extrapolation (for Newton steps)."""
    return _second(f, z, h, f0)
