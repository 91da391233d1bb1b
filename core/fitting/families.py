"""The claim-size families the fitter knows: parameter names, the map to an unconstrained
space the optimiser works in, starting values, and the core severity they build.

Positive parameters are optimised on the log scale (so the optimiser never leaves the
domain); location and shape parameters that may take any sign are left as they are. The
natural-scale covariance follows from the log-scale one by the delta method.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from core.severities import (
    Exponential,
    Gamma,
    GeneralizedPareto,
    Lognormal,
    Normal,
    Pareto,
    Severity,
    Weibull,
)

Floats = NDArray[np.float64]


@dataclass(frozen=True, kw_only=True)
class Family:
    """One parametric family: names in the order of the covariance, which are positive."""

    name: str
    names: tuple[str, ...]
    positive: tuple[bool, ...]
    build: Callable[..., Severity]
    start: Callable[[Floats], tuple[float, ...]]
    positive_support: bool = True

    @property
    def size(self) -> int:
        return len(self.names)

    @property
    def min_claims(self) -> int:
        # One more observation than parameters, and never fewer than 5: below that the
        # likelihood surface is too flat for the observed information to mean anything.
        return max(self.size + 1, 5)

    def to_free(self, theta: Floats) -> Floats:
        return np.where(self.positive, np.log(np.where(self.positive, theta, 1.0)), theta)

    def from_free(self, z: Floats) -> Floats:
        return np.where(self.positive, np.exp(np.where(self.positive, z, 0.0)), z)

    def jacobian(self, theta: Floats) -> Floats:
        """d theta / d z at theta (diagonal): theta for log-scale parameters, else 1."""
        return np.where(self.positive, theta, 1.0)

    def severity(self, theta: Floats) -> Severity:
        return self.build(**dict(zip(self.names, (float(v) for v in theta), strict=True)))


def _log_moments(x: Floats) -> tuple[float, float]:
    logs = np.log(x)
    return float(logs.mean()), float(max(logs.std(), 1e-3))


def _lognormal_start(x: Floats) -> tuple[float, ...]:
    return _log_moments(x)


def _gamma_start(x: Floats) -> tuple[float, ...]:
    # Minka's (2002) closed-form approximation to the gamma shape MLE: close enough to start.
    s = math.log(float(x.mean())) - float(np.log(x).mean())
    s = max(s, 1e-8)
    shape = (3 - s + math.sqrt((s - 3) ** 2 + 24 * s)) / (12 * s)
    return shape, float(x.mean()) / shape


def _weibull_start(x: Floats) -> tuple[float, ...]:
    # log X is Gumbel-min with scale 1/shape: its sd is pi / (shape sqrt 6).
    m, s = _log_moments(x)
    shape = math.pi / (s * math.sqrt(6.0))
    return shape, math.exp(m + 0.5772156649015329 / shape)


def _pareto_start(x: Floats) -> tuple[float, ...]:
    # Method of moments when the variance exceeds the squared mean; else a moderate tail.
    mean, var = float(x.mean()), float(x.var())
    alpha = 2 * var / (var - mean**2) if var > mean**2 else 3.0
    alpha = min(max(alpha, 1.2), 50.0)
    return alpha, mean * (alpha - 1.0)


def _gpd_start(x: Floats) -> tuple[float, ...]:
    # Method of moments (Hosking and Wallis 1987), valid for xi < 1/2; clipped as a start.
    mean, var = float(x.mean()), float(x.var())
    xi = 0.5 * (1.0 - mean**2 / var) if var > 0 else 0.1
    xi = min(max(xi, -0.4), 0.45)
    return xi, max(mean * (1.0 - xi), 1e-12)


def _exponential_start(x: Floats) -> tuple[float, ...]:
    return (float(x.mean()),)


def _normal_start(x: Floats) -> tuple[float, ...]:
    return float(x.mean()), float(max(x.std(), 1e-12 * max(abs(float(x.mean())), 1.0)))


FAMILIES: dict[str, Family] = {
    f.name: f
    for f in (
        Family(name="lognormal", names=("mu", "sigma"), positive=(False, True), build=Lognormal,
               start=_lognormal_start),
        Family(name="gamma", names=("shape", "scale"), positive=(True, True), build=Gamma,
               start=_gamma_start),
        Family(name="weibull", names=("shape", "scale"), positive=(True, True), build=Weibull,
               start=_weibull_start),
        Family(name="exponential", names=("mean",), positive=(True,), build=Exponential,
               start=_exponential_start),
        Family(name="pareto", names=("alpha", "scale"), positive=(True, True), build=Pareto,
               start=_pareto_start),
        Family(name="generalized_pareto", names=("xi", "scale"), positive=(False, True),
               build=GeneralizedPareto, start=_gpd_start),
        Family(name="normal", names=("mean", "sd"), positive=(False, True), build=Normal,
               start=_normal_start, positive_support=False),
    )
}
