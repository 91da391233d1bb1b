"""The cumulant of the claim surplus process and what follows from it (light-tailed claims).

With claims X of cumulant kappa_X, the claim surplus S_t = (claims up to t) - c t has
log E[e^{a S_t}] = t kappa(a), kappa(a) = lambda (M(a) - 1) - c a, M = exp(kappa_X).

- adjustment coefficient gamma > 0: kappa(gamma) = 0 (Lundberg); psi(u) <= exp(-gamma u);
- Cramer-Lundberg: psi(u) ~ C exp(-gamma u), C = (c - lambda mu) / (lambda M'(gamma) - c);
- finite horizon: for every a >= 0, exp(a S_t - kappa(a) t) is a martingale, so by Doob's
  inequality psi(u, T) <= exp(-(a u - max(kappa(a), 0) T)). The best a is gamma while
  kappa'(gamma) T >= u and otherwise the a with kappa'(a) = u / T; that a is also the change of
  measure that makes ruin by T typical (Asmussen & Albrecher, Ruin Probabilities, 2010, the
  finite-horizon chapter, from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable

from scipy.optimize import brentq

from core.ruin.process import SurplusProcess

_DOUBLINGS = 400


def _kappa_x(process: SurplusProcess, a: float) -> float:
    return float(process.net_severity.cumulant(a)) if a != 0.0 else 0.0


def kappa(process: SurplusProcess, a: float) -> float:
    """kappa(a) = lambda (M(a) - 1) - c a."""
    return process.claim_rate * math.expm1(_kappa_x(process, a)) - process.premium * a


def kappa_slope(process: SurplusProcess, a: float) -> float:
    """kappa'(a) = lambda M(a) kappa_X'(a) - c: the drift of S under the tilt by a."""
    sev = process.net_severity
    first = float(sev.cumulant_derivatives(a)[0])
    return process.claim_rate * math.exp(_kappa_x(process, a)) * first - process.premium


def _upper(process: SurplusProcess, above: Callable[[float], bool]) -> float | None:
    """A tilt a inside the cumulant's domain with above(a) true, or None."""
    bound = float(process.net_severity.cumulant_bound)
    if math.isfinite(bound):
        a = bound * (1.0 - 1e-12)
        return a if above(a) else None
    a = 1.0 / max(process.mean_claim, 1e-300)
    for _ in range(_DOUBLINGS):
        if above(a):
            return a
        a *= 2.0
    return None


def adjustment_coefficient(process: SurplusProcess) -> float | None:
    """gamma > 0 with kappa_X(gamma) = log(1 + c gamma / lambda); None if there is none."""
    if process.net_severity.tail != "light" or not process.profitable:
        return None
    lam, c = process.claim_rate, process.premium

    def f(a: float) -> float:
        return _kappa_x(process, a) - math.log1p(c * a / lam)

    hi = _upper(process, lambda a: f(a) > 0)
    if hi is None:
        return None
    lo = 0.5 * hi
    for _ in range(_DOUBLINGS):  # f < 0 on (0, gamma): convex, f(0) = 0, f'(0) = mu - c/lambda < 0
        if f(lo) < 0:
            break
        lo *= 0.5
    else:
        return None
    return float(brentq(f, lo, hi, xtol=1e-15 * hi, rtol=1e-14, maxiter=500))


def lundberg_constant(process: SurplusProcess, gamma: float) -> float:
    """C in psi(u) ~ C exp(-gamma u); M'(gamma) = M(gamma) kappa_X'(gamma), M(gamma) = 1 + c
    gamma / lambda."""
    lam, c = process.claim_rate, process.premium
    slope = float(process.net_severity.cumulant_derivatives(gamma)[0])
    m_prime = (1.0 + c * gamma / lam) * slope
    return (c - lam * process.mean_claim) / (lam * m_prime - c)


def horizon_tilt(process: SurplusProcess, u: float, horizon: float, gamma: float | None) -> float:
    """The change of measure for psi(u, T): gamma (0 without one) while kappa'(gamma) T >= u,
    else the a with kappa'(a) = u / T."""
    start = 0.0 if gamma is None else gamma
    if not math.isfinite(horizon):
        return start
    slope = u / horizon
    if kappa_slope(process, start) >= slope:
        return start
    hi = _upper(process, lambda a: kappa_slope(process, a) > slope)
    if hi is None:
        return start
    return float(brentq(lambda a: kappa_slope(process, a) - slope, start, hi,
                        xtol=1e-14 * hi, rtol=1e-12, maxiter=500))


def doob_exponent(process: SurplusProcess, u: float, horizon: float, gamma: float | None) -> float:
    """L(u) with psi(u, T) <= exp(-L(u)): a u - max(kappa(a), 0) T at the tilt above."""
    a = horizon_tilt(process, u, horizon, gamma)
    if not math.isfinite(horizon) or a == gamma:
        return a * u  # kappa(gamma) = 0
    return a * u - max(kappa(process, a), 0.0) * horizon


def doob_capital(
    process: SurplusProcess, target: float, horizon: float, gamma: float | None
) -> float | None:
    """A capital with psi(u, T) <= target for sure (the Lundberg/Doob bound), None if none."""
    need = -math.log(target)
    if gamma is not None and not math.isfinite(horizon):
        return need / gamma

    def gap(u: float) -> float:
        return doob_exponent(process, u, horizon, gamma) - need

    hi = max(process.mean_claim, 1e-300)
    for _ in range(_DOUBLINGS):
        if gap(hi) > 0:
            return float(brentq(gap, 0.0, hi, xtol=1e-12 * hi, rtol=1e-12, maxiter=500))
        hi *= 2.0
    return None
