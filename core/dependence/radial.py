"""Radial conditional Monte Carlo for log-elliptical sums (Kortschak and Hashorva 2013).

For log X = mu + A g with g standard normal, write g = R Theta with Theta uniform on the
sphere and R^2 ~ chi-square(m) independent of it. Given Theta, S(r Theta) is convex in r, so
for x above S(0) = sum e^{mu} the event {S > x} is {R > r*(Theta)} with r* the root along
Theta, and P(S > x | Theta) = P(chi-square(m) > r*^2), a regularised gamma function. The
estimator gives exceedance probabilities only (the stop-loss along a ray has no closed form).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from scipy import special

from core.dependence.amounts import Amounts
from core.errors import MethodError

FloatArray = npt.NDArray[np.float64]
_STEPS = 60


def check_thresholds(amounts: Amounts, x: FloatArray) -> None:
    floor = float(np.sum(np.exp(amounts.mu)))
    if np.any(x <= floor):
        raise MethodError("method", f"radial needs thresholds above {floor:g} (the sum at the "
                                    "centre of the log-normal vector)")


def radial_values(amounts: Amounts, n: int, rng: np.random.Generator,
                  x: FloatArray) -> FloatArray:
    """(n, G): P(S > x_g | Theta) per sample."""
    m = amounts.dim
    g = rng.standard_normal((n, m))
    theta = g / np.linalg.norm(g, axis=1, keepdims=True)
    c = theta @ amounts.loading.T  # (n, m) slopes along each ray
    out = np.zeros((n, x.size))
    live = np.any(c > 0, axis=1)
    mu = amounts.mu
    for col, xv in enumerate(x):
        lx = math.log(float(xv))
        with np.errstate(divide="ignore", invalid="ignore"):
            start = np.where(c > 0, (lx - mu[None, :]) / c, np.inf).min(axis=1)
        r = np.where(live, np.maximum(start, 0.0), 0.0)
        for _ in range(_STEPS):
            y = mu[None, :] + r[:, None] * c
            top = y.max(axis=1, keepdims=True)
            e = np.exp(y - top)
            s = e.sum(axis=1)
            val = np.log(s) + top[:, 0] - lx
            der = (e * c).sum(axis=1) / s
            step = np.where(live & (der > 0), val / np.where(der > 0, der, 1.0), 0.0)
            r = r - step
            if np.all(np.abs(step) <= 1e-11 * (1.0 + r)):
                break
        out[:, col] = np.where(live, special.gammaincc(0.5 * m, 0.5 * r * r), 0.0)
    return out
