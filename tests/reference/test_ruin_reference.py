"""Headline ruin figures against references from outside the project: closed forms from the
literature, an independent deterministic method (the Panjer recursion of core.recursion, written
separately from every estimator) and classical theorems."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.linalg import expm

from core import Exponential, Lognormal, Pareto, Poisson, Precision, SurplusProcess
from core.portfolio import Line, Portfolio
from core.recursion import aggregate_bounds, exceedance_bounds
from core.ruin.api import ruin
from core.ruin.geometric import geometric_sum
from core.severities import PhaseType


def within_se(est, exact: float, k: float = 3.0) -> bool:
    return abs(est.probability - exact) <= k * est.std_error


def within_bounds(est, low: float, high: float, k: float = 3.0) -> bool:
    return low - k * est.std_error <= est.probability <= high + k * est.std_error


# ---------------------------------------------------------------------------- exponential claims

THETA = 0.1
EXP = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=THETA)


def exponential_psi(u: float, theta: float = THETA, mean: float = 1.0) -> float:
    # Classical closed form: psi(u) = exp(-theta u / ((1 + theta) mean)) / (1 + theta).
    return math.exp(-theta * u / ((1 + theta) * mean)) / (1 + theta)


def exponential_capital(target: float, theta: float = THETA, mean: float = 1.0) -> float:
    return (1 + theta) * mean / theta * math.log(1.0 / ((1 + theta) * target))


def test_exponential_claims_near_1e_minus_2_and_1e_minus_8_with_1e4_paths():
    caps = [exponential_capital(1e-2), exponential_capital(1e-8)]
    res = ruin(EXP, caps, precision=Precision(samples=10_000), seed=1)
    assert res.method == "tilted"
    for est in res.estimates:
        exact = exponential_psi(est.capital)
        assert est.relative_error <= 0.005
        assert within_se(est, exact), (est, exact)
        assert est.diagnostics.reliable


def test_capital_for_1e_minus_3_matches_the_closed_form_within_half_a_percent():
    res = ruin(EXP, [10.0], target_probability=1e-3, precision=Precision(samples=10_000), seed=2)
    found = res.capital_for_target
    exact = exponential_capital(1e-3)
    assert abs(found.capital - exact) <= 0.005 * exact
    assert found.ci_low <= exact <= found.ci_high


def test_siegmund_intervals_cover_the_closed_form_over_seeds():
    # Unbiasedness and coverage: 40 independent runs at two capitals.
    caps = [8.0, 30.0]
    z, covered = [], 0
    for seed in range(40):
        res = ruin(EXP, caps, precision=Precision(samples=1000), seed=1000 + seed)
        for est in res.estimates:
            exact = exponential_psi(est.capital)
            z.append((est.probability - exact) / est.std_error)
            covered += est.ci_low <= exact <= est.ci_high
    # mean of 80 z-scores, each ~ N(0, 1) (the two capitals share paths: 40 effective)
    assert abs(float(np.mean(z))) <= 3.0 / math.sqrt(40)
    # 95% intervals: fewer than 68 of 80 covering has probability below 1e-3 (binomial)
    assert covered >= 68


# ---------------------------------------------------------------------------- phase-type claims


def phase_type_psi(alpha: np.ndarray, sub: np.ndarray, lam: float, c: float, u: float) -> float:
    # Asmussen & Albrecher, Ruin Probabilities (2010), Cor. IX.3.1 (from memory):
    # psi(u) = alpha_+ expm((T + t alpha_+) u) 1, alpha_+ = (lambda / c) alpha (-T)^-1.
    alpha_plus = lam / c * alpha @ np.linalg.inv(-sub)
    exit_rates = -sub.sum(axis=1)
    return float(alpha_plus @ expm((sub + np.outer(exit_rates, alpha_plus)) * u)
                 @ np.ones(alpha.size))


def test_phase_type_formula_reduces_to_the_exponential_closed_form():
    lam, theta, rate = 1.5, 0.2, 2.0
    c = (1 + theta) * lam / rate
    for u in [0.0, 3.0, 20.0]:
        got = phase_type_psi(np.array([1.0]), np.array([[-rate]]), lam, c, u)
        assert got == pytest.approx(exponential_psi(u, theta, 1.0 / rate), rel=1e-12)


def test_mixture_of_exponentials_matches_the_phase_type_formula():
    alpha, sub = np.array([0.4, 0.6]), np.array([[-0.5, 0.0], [0.0, -3.0]])
    sev = PhaseType(alpha=alpha, T=sub)
    p = SurplusProcess(claim_rate=1.0, severity=sev, loading=0.15)
    res = ruin(p, [5.0, 60.0], precision=Precision(samples=10_000), seed=3)
    for est in res.estimates:
        exact = phase_type_psi(alpha, sub, 1.0, p.premium, est.capital)
        assert within_se(est, exact), (est, exact)
        assert est.relative_error <= 0.005
        # Cramer-Lundberg is exact in form for a two-phase mixture only asymptotically
        assert est.approximation == pytest.approx(exact, rel=0.05)


# ---------------------------------------------------------------------------- heavy tails


def recursion_psi(process: SurplusProcess, capitals: list[float]) -> list[tuple[float, ...]]:
    # Independent deterministic method: Panjer recursion of the Pollaczek-Khinchine geometric
    # sum with claims rounded down and up (core.recursion), rigorous lower and upper bounds.
    return exceedance_bounds(geometric_sum(process), capitals, cells=8192)


@pytest.mark.parametrize(
    ("severity", "theta", "capitals"),
    [
        (Pareto(alpha=3.0, scale=2.0), 0.2, [165.0, 4470.0]),  # psi about 1e-3 and 1e-6
        (Lognormal(mu=-0.5, sigma=1.0), 0.25, [57.0, 185.0]),
    ],
    ids=["lomax", "lognormal"],
)
def test_heavy_tails_near_1e_minus_3_and_1e_minus_6_with_1e5_samples(severity, theta, capitals):
    p = SurplusProcess(claim_rate=1.0, severity=severity, loading=theta)
    res = ruin(p, capitals, precision=Precision(samples=100_000), seed=4)
    bounds = recursion_psi(p, capitals)
    for est, (low, high, _) in zip(res.estimates, bounds, strict=True):
        assert 3e-7 <= est.probability <= 3e-3
        assert est.relative_error <= 0.01
        assert within_bounds(est, low, high), (est, low, high)
    assert res.adjustment_coefficient is None


def test_lomax_far_out_agrees_with_the_subexponential_asymptotic():
    # psi(u) ~ rho / (1 - rho) sf_I(u) (subexponential asymptotic; Embrechts & Veraverbeke). The
    # next term, E[N(N-1)] E[I] f_I(u) (Omey & Willekens, from memory), is a relative
    # 2 rho / (1 - rho) E[I] f_I / sf_I = 20 / (1 + u/2) here. The gap between the estimate and
    # the first term must be that second term, up to three standard errors and the expansion's
    # remainder, which is o(1/u): allowed 5% of the second term this far out (the integrated
    # tail, Pareto alpha 2, has no second moment, so no third term is quoted; with two seeds and
    # two stream layouts the remainder measured about 2% at u = 4470). The gap shrinks with u.
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    caps = [4470.0, 1e5]
    res = ruin(p, caps, method="conditional", precision=Precision(samples=50_000), seed=5)
    gaps = []
    for est in res.estimates:
        first = 5.0 * (1 + est.capital / 2) ** -2
        assert est.approximation == pytest.approx(first, rel=1e-12)
        gap = abs(est.probability / first - 1)
        second = 20.0 / (1 + est.capital / 2)
        assert abs(gap - second) <= 0.05 * second + 3 * est.relative_error, (gap, second)
        gaps.append(gap)
    assert gaps[1] < gaps[0]


def test_claims_capped_by_a_retention_match_the_recursion():
    # Siegmund with the stepwise tilt of the capped (net) claim against the Panjer recursion of
    # the same process's Pollaczek-Khinchine sum.
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2,
                       retention=10.0)
    caps = [20.0, 60.0]
    res = ruin(p, caps, precision=Precision(samples=10_000), seed=6)
    assert res.method == "tilted"
    for est, (low, high, _) in zip(res.estimates, recursion_psi(p, caps), strict=True):
        assert within_bounds(est, low, high), (est, low, high)
        assert est.relative_error <= 0.005


# ---------------------------------------------------------------------------- finite horizon


def test_finite_horizon_grows_with_the_horizon_towards_the_closed_form():
    caps = [5.0, 30.0]
    previous = [0.0, 0.0]
    for horizon in [10.0, 100.0, 1000.0, 10_000.0]:
        res = ruin(EXP, caps, horizon=horizon, precision=Precision(samples=4000), seed=7)
        for i, est in enumerate(res.estimates):
            assert est.probability > previous[i] + 3 * est.std_error or horizon == 10_000.0
            assert est.probability <= exponential_psi(est.capital) + 3 * est.std_error
            previous[i] = est.probability
    for est in res.estimates:  # by T = 10^4 ruin has almost surely happened if it will
        assert within_se(est, exponential_psi(est.capital))


def takacs_psi0(process: SurplusProcess, horizon: float, claims_above) -> float:
    # Takacs' ballot theorem (classical, from memory): with zero capital,
    # 1 - psi(0, T) = E[(1 - S(T) / (c T))^+] = 1 - (1 / (c T)) int_0^{cT} P(S(T) > x) dx.
    top = process.premium * horizon
    return integrate.quad(claims_above, 0.0, top, limit=400)[0] / top


@pytest.mark.parametrize("method", ["tilted", "crude"])
def test_zero_capital_finite_horizon_matches_takacs_with_exponential_claims(method):
    lam, horizon = 1.0, 20.0
    n = np.arange(1, 200)
    weights = stats.poisson(lam * horizon).pmf(n)

    def above(x: float) -> float:  # Poisson mixture of gamma laws (scipy.stats.gamma)
        return float(weights @ stats.gamma(n).sf(x))

    exact = takacs_psi0(EXP, horizon, above)
    res = ruin(EXP, [0.0], horizon=horizon, method=method, precision=Precision(samples=20_000),
               seed=8)
    assert within_se(res.estimates[0], exact)


def test_zero_capital_finite_horizon_matches_takacs_with_lomax_claims():
    # Heavy tails: the conditional estimator; P(S(T) > x) from the recursion's bounds.
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    horizon = 10.0
    top = p.premium * horizon
    law = aggregate_bounds(Portfolio(lines=[Line(count=Poisson(mean=horizon),
                                                 severity=p.severity)]), top, 4096)
    x = law.points
    # P(S > x) decreases: Riemann sums on the grid bound the integral from both sides
    low_sf = np.array([law.exceedance(float(v))[0] for v in x])
    high_sf = np.array([law.exceedance(float(v))[1] for v in x])
    h = x[1] - x[0]
    low = h * low_sf[1:].sum() / top
    high = h * high_sf[:-1].sum() / top
    res = ruin(p, [0.0], horizon=horizon, precision=Precision(samples=20_000), seed=9)
    assert res.method == "conditional"
    assert within_bounds(res.estimates[0], low, high)


def test_heavy_finite_horizon_stays_below_and_approaches_the_infinite_horizon_value():
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    low, high, _ = recursion_psi(p, [20.0])[0]
    short = ruin(p, [20.0], horizon=20.0, precision=Precision(samples=20_000), seed=10)
    long = ruin(p, [20.0], horizon=2000.0, precision=Precision(samples=4000), seed=11)
    a, b = short.estimates[0], long.estimates[0]
    assert a.probability + 3 * a.std_error < b.probability
    assert b.probability <= high + 3 * b.std_error
    # what is left after T: one big claim later on, lambda / (c - lambda mu) int sf beyond
    # u + (c - lambda mu) T (the single-big-jump asymptotic, from memory); 3x for its error
    drift = p.premium - p.claim_rate * p.mean_claim
    left = 1.0 / drift * (1 + (20.0 + drift * 2000.0) / 2.0) ** -2  # int of (1 + t/2)^-3
    assert b.probability >= low - 3 * left - 3 * b.std_error
