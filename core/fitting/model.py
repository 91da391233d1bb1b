"""A fittable model: how its parameters map to the optimiser's free scale and to a severity,
and what data it needs. The standard families and the spliced law are both built as one."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from core.fitting import mle
from core.fitting.data import ClaimData, Floats
from core.fitting.likelihood import objective
from core.fitting.results import Fit
from core.severities import Severity


@dataclass(frozen=True, kw_only=True)
class Model:
    name: str
    names: tuple[str, ...]
    natural: Callable[[Floats], Floats]  # free z -> theta
    free: Callable[[Floats], Floats]  # theta -> free z
    jacobian: Callable[[Floats], Floats]  # d theta / d z at theta (diagonal)
    law: Callable[[Floats], Severity]  # theta -> severity
    check: Callable[[ClaimData], None]  # raises ParameterError for data it cannot fit
    start: Callable[[ClaimData], Floats]  # natural-scale start from the data
    simplex: bool = True  # False: the start is near the optimum, Newton steps suffice

    def build(self, z: Floats) -> Severity:
        return self.law(self.natural(z))

    def fit(self, data: ClaimData) -> Fit:
        self.check(data)
        nll = objective(self.build, data)
        z, f, converged = mle.minimise(nll, self.free(self.start(data)), simplex=self.simplex)
        theta = self.natural(z)
        cov, gap, notes = mle.covariance(nll, z, self.jacobian(theta))
        if not converged:
            notes.append("the simplex search stopped at its iteration limit; the Newton "
                         "polish that followed may still have reached the optimum")
        return Fit(family=self.name, names=self.names, theta=theta, covariance=cov,
                   log_likelihood=-f, n=data.n, severity=self.law(theta), converged=converged,
                   hessian_error=gap, notes=notes)

    def refitter(self, original: Fit) -> Callable[[ClaimData], Severity]:
        """Quick refits of replicates of the original data, started at the original fit and
        iterated with its information scaled to the replicate's size."""
        z0 = self.free(original.theta)
        base = None if original.covariance is None else mle.free_covariance(
            original.covariance, self.jacobian(original.theta))

        def refit(sample: ClaimData) -> Severity:
            self.check(sample)
            nll = objective(self.build, sample)
            if base is None:
                return self.build(mle.minimise(nll, z0, polish=False)[0])
            metric = base * (original.n / sample.n)
            return self.build(mle.refit(nll, z0, np.asarray(metric)))

        return refit
