"""The change of measure for surplus paths: claims tilted by a, arrivals at rate lambda W(a).

Under the new measure claims have density f(y) e^{a z(y)} / W(a) and arrive at rate
lambda W(a). With the exact exponential tilt z(y) = y and W = M, the moment generating function;
for a law without a closed-form tilted sampler (a claim capped by a retention, say) the stepwise
tilt of core.sampling is used: z(y) is the reference point of y's cell and W its stepwise
cumulant. Either way the likelihood ratio of a path stopped at a claim instant tau is exact:

    dP/dQ = prod_i [lambda e^{-lambda A_i} f(X_i)] / [lambda W e^{-lambda W A_i} g(X_i)]
          = exp(-a sum_i z_i + lambda (W(a) - 1) tau),   g(y) = f(y) e^{a z(y)} / W,

so each claim contributes (its log f/g) - log W + lambda (W - 1) A_i to log dP/dQ. Siegmund's
algorithm takes a with lambda (W(a) - 1) = c a; then log dP/dQ = -a (sum z_i - c tau), which for
the exact tilt is -gamma S_tau.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from core.ruin.process import SurplusProcess
from core.sampling import StepwiseTilt, TiltGrid
from core.severities import Severity


@dataclass(frozen=True)
class ClaimTilt:
    """Claims under the tilt by `a`: the tilted law in closed form, or a stepwise tilt."""

    a: float
    log_w: float  # log W(a) of the law actually sampled
    law: Severity | None = None
    step: StepwiseTilt | None = None

    def sample(self, size: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """(claims, per-claim log f/g)."""
        if self.step is not None:
            return self.step.sample(size, rng)
        assert self.law is not None
        y = self.law.sample(size, rng)
        if self.a == 0.0:
            return y, np.zeros(size)
        return y, self.log_w - self.a * y

    @property
    def mean(self) -> float:
        """Mean claim under the tilt (of the reference points for a stepwise tilt)."""
        if self.step is not None:
            return self.step.grid.tilted_mean_ref(self.a)
        assert self.law is not None
        return float(self.law.mean)


def exact_tilt(sev: Severity, a: float) -> ClaimTilt | None:
    if a == 0.0:
        return ClaimTilt(0.0, 0.0, law=sev)
    try:
        law = sev.tilted(a)
    except NotImplementedError:
        return None
    return ClaimTilt(a, float(sev.cumulant(a)), law=law)


def claim_tilt(sev: Severity, a: float) -> ClaimTilt:
    """The exact tilt where the law has one, else the stepwise tilt on a grid fitted to a."""
    exact = exact_tilt(sev, a)
    if exact is not None:
        return exact
    step = StepwiseTilt.for_severity(sev, a)
    return ClaimTilt(a, step.log_w, step=step)


def siegmund_tilt(process: SurplusProcess, gamma: float) -> ClaimTilt | None:
    """The tilt with lambda (W(a) - 1) = c a for the law actually sampled: gamma itself for an
    exact tilt; for a stepwise tilt the root gamma_s of the stepwise equation on a grid fitted to
    gamma (close to gamma, and exactly the root for what is drawn). None if it has no root."""
    sev = process.net_severity
    exact = exact_tilt(sev, gamma)
    if exact is not None:
        return exact
    grid = TiltGrid.for_tilt(sev, gamma)
    lam, c = process.claim_rate, process.premium

    def f(a: float) -> float:
        return StepwiseTilt(grid, a).log_w - math.log1p(c * a / lam)

    lo, hi = 0.5 * gamma, 2.0 * gamma
    for _ in range(60):
        if f(lo) < 0:
            break
        lo *= 0.5
    else:
        return None
    for _ in range(60):
        if f(hi) > 0:
            break
        hi *= 2.0
    else:
        return None
    a = float(brentq(f, lo, hi, xtol=1e-15 * hi, rtol=1e-14, maxiter=500))
    step = StepwiseTilt(grid, a)
    return ClaimTilt(a, step.log_w, step=step)
