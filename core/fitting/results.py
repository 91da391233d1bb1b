"""Plain records of the fitter (no maths here)."""

from __future__ import annotations

from dataclasses import dataclass, field

from core.fitting.data import Floats
from core.severities import Severity


@dataclass(frozen=True, kw_only=True)
class Fit:
    """A maximum-likelihood fit. ``covariance`` is the inverse observed information on the
    natural parameter scale (None when the information matrix is not positive definite, e.g.
    at a boundary); ``hessian_error`` is the relative gap between two finite-difference
    steps, a check on the numerical derivatives."""

    family: str
    names: tuple[str, ...]
    theta: Floats
    covariance: Floats | None
    log_likelihood: float
    n: int
    severity: Severity
    converged: bool
    hessian_error: float
    notes: list[str] = field(default_factory=list)

    @property
    def parameters(self) -> dict[str, float]:
        return {k: float(v) for k, v in zip(self.names, self.theta, strict=True)}

    @property
    def std_errors(self) -> dict[str, float | None]:
        if self.covariance is None:
            return dict.fromkeys(self.names)
        return {k: float(self.covariance[i, i]) ** 0.5 for i, k in enumerate(self.names)}

    @property
    def aic(self) -> float:
        return 2.0 * len(self.names) - 2.0 * self.log_likelihood

    @property
    def bic(self) -> float:
        import math

        return len(self.names) * math.log(self.n) - 2.0 * self.log_likelihood


@dataclass(frozen=True, kw_only=True)
class TestResult:
    """A goodness-of-fit statistic and its parametric-bootstrap p-value."""

    statistic: float
    p_value: float
    replicates: int


@dataclass(frozen=True, kw_only=True)
class CountFit:
    family: str
    names: tuple[str, ...]
    theta: Floats
    covariance: Floats | None
    log_likelihood: float
    n: int
    notes: list[str] = field(default_factory=list)
