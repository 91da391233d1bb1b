"""ruin(method="recursion"): deterministic bounds of the Pollaczek-Khinchine sum against closed
forms from the literature and against the Monte Carlo estimators (an independent method)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import expm

from core import Exponential, MethodError, Pareto, Precision, SurplusProcess
from core.ruin.api import ruin
from core.severities import PhaseType


def exponential_psi(u: float, theta: float, mean: float = 1.0) -> float:
    # Classical closed form for exponential claims:
    # psi(u) = exp(-theta u / ((1 + theta) mean)) / (1 + theta).
    return math.exp(-theta * u / ((1 + theta) * mean)) / (1 + theta)


def exponential_capital(target: float, theta: float, mean: float = 1.0) -> float:
    # The same closed form solved for psi(u) = target.
    return (1 + theta) * mean / theta * math.log(1.0 / ((1 + theta) * target))


def phase_type_psi(alpha: np.ndarray, sub: np.ndarray, lam: float, c: float, u: float) -> float:
    # Asmussen & Albrecher, Ruin Probabilities (2010), Cor. IX.3.1 (from memory):
    # psi(u) = alpha_+ expm((T + t alpha_+) u) 1, alpha_+ = (lambda / c) alpha (-T)^-1.
    alpha_plus = lam / c * alpha @ np.linalg.inv(-sub)
    exit_rates = -sub.sum(axis=1)
    return float(alpha_plus @ expm((sub + np.outer(exit_rates, alpha_plus)) * u)
                 @ np.ones(alpha.size))


def test_bounds_bracket_the_exponential_closed_form_with_no_sampling():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
    caps = [0.0, 5.0, 50.0, 120.0]
    res = ruin(p, caps, method="recursion", seed=1)
    assert res.method == "recursion" and res.warnings == []
    assert res.adjustment_coefficient == pytest.approx(0.1 / 1.1, rel=1e-9)  # theta/((1+theta) mu)
    for est in res.estimates:
        exact = exponential_psi(est.capital, 0.1)
        assert est.ci_low <= exact <= est.ci_high, (est, exact)
        assert est.ci_low <= est.probability <= est.ci_high
        assert est.std_error is None and est.samples == 0
        # informative bounds: the rounding gap grows with the number of ladder heights summed
        # (about gamma u here), to some 15% of psi at u = 120 on 8192 cells
        assert est.ci_high - est.ci_low <= 0.2 * exact
    # psi(0) = rho = 1/(1+theta) exactly (classical; the recursion computes P(S > 0) exactly)
    assert res.estimates[0].probability == pytest.approx(1 / 1.1, rel=1e-12)


def test_far_tail_bounds_stay_in_log_space():
    # theta = 1: psi(u) = exp(-u/2)/2 (the closed form above); 1e-10 at u = 45, 1e-30 at u = 137
    p = SurplusProcess(claim_rate=2.0, severity=Exponential(mean=1.0), loading=1.0)
    res = ruin(p, [45.0, 137.0], method="recursion", seed=1)
    for est in res.estimates:
        exact = exponential_psi(est.capital, 1.0)
        assert 0.0 < est.ci_low <= exact <= est.ci_high <= 2 * exact, (est, exact)


def test_bounds_bracket_the_phase_type_formula():
    alpha, sub = np.array([0.4, 0.6]), np.array([[-0.5, 0.0], [0.0, -3.0]])
    p = SurplusProcess(claim_rate=1.0, severity=PhaseType(alpha=alpha, T=sub), loading=0.15)
    res = ruin(p, [5.0, 40.0], method="recursion", seed=1)
    for est in res.estimates:
        exact = phase_type_psi(alpha, sub, 1.0, p.premium, est.capital)
        assert est.ci_low <= exact <= est.ci_high, (est, exact)


def test_capital_for_a_target_brackets_the_closed_form():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
    res = ruin(p, [10.0], method="recursion", target_probability=1e-3, seed=1)
    found = res.capital_for_target
    exact = exponential_capital(1e-3, 0.1)
    # ci_low surely falls short, ci_high surely suffices: the exact capital lies between
    assert found.ci_low < exact <= found.ci_high
    assert found.ci_high - found.ci_low <= 0.02 * exact
    # The point interpolates Romberg-extrapolated estimates (errors of order h^6 here): far
    # inside the bounds' width.
    assert found.capital == pytest.approx(exact, rel=1e-6)


def test_target_at_or_above_psi_of_zero_needs_no_capital():
    # psi(0) = rho = 1/(1 + theta) (classical) and psi decreases
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.25)
    found = ruin(p, [1.0], method="recursion", target_probability=0.8, seed=1).capital_for_target
    assert (found.capital, found.ci_low, found.ci_high) == (0.0, 0.0, 0.0)


def test_lomax_bounds_agree_with_the_monte_carlo_estimate():
    # Independent methods: conditional Monte Carlo on the same Pollaczek-Khinchine sum must fall
    # within 4 of its standard errors of the rigorous bounds.
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    caps = [10.0, 165.0, 1000.0]
    bounds = ruin(p, caps, method="recursion", seed=1).estimates
    mc = ruin(p, caps, method="conditional", precision=Precision(samples=20_000), seed=7)
    for b, est in zip(bounds, mc.estimates, strict=True):
        assert b.ci_low - 4 * est.std_error <= est.probability <= b.ci_high + 4 * est.std_error, (
            b, est)
        assert b.ci_high - b.ci_low <= 0.01 * b.probability


def test_relative_error_refines_the_grid_until_the_bounds_meet_it():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
    coarse = ruin(p, [50.0], method="recursion", seed=1).estimates[0]
    res = ruin(p, [50.0], method="recursion", precision=Precision(relative_error=0.008),
               seed=1)
    fine = res.estimates[0]
    assert coarse.relative_error > 0.008 >= fine.relative_error
    assert res.stopped_by == "relative_error" and "16384 cells" in fine.diagnostics.reason
    exact = exponential_psi(50.0, 0.1)
    assert coarse.ci_low <= fine.ci_low <= exact <= fine.ci_high <= coarse.ci_high


def test_time_limit_stops_the_refinement_and_says_so():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
    res = ruin(p, [50.0], method="recursion",
               precision=Precision(relative_error=1e-6, time_limit_s=1e-3), seed=1)
    assert res.stopped_by == "time_limit"
    assert any("time limit" in w for w in res.warnings)
    est = res.estimates[0]
    assert est.ci_low <= exponential_psi(50.0, 0.1) <= est.ci_high  # the first grid still holds


def test_recursion_is_deterministic_whatever_the_seed():
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=2.5, scale=1.0), loading=0.3)
    a, b = (ruin(p, [3.0, 30.0], method="recursion", seed=s) for s in (1, 2))
    assert [(e.ci_low, e.probability, e.ci_high) for e in a.estimates] == [
        (e.ci_low, e.probability, e.ci_high) for e in b.estimates]


def test_finite_horizon_is_refused_naming_the_horizon():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
    with pytest.raises(MethodError) as info:
        ruin(p, [5.0], horizon=10.0, method="recursion", seed=1)
    assert info.value.parameter == "horizon"


def test_failed_net_profit_condition_is_certain_ruin_for_recursion_too():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=-0.1)
    res = ruin(p, [0.0, 100.0], method="recursion", seed=1)
    assert res.stopped_by == "exact" and "net profit condition fails" in res.warnings[0]
    assert [e.probability for e in res.estimates] == [1.0, 1.0]
