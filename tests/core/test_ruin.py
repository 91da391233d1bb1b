"""Ruin: the surplus process, the integrated-tail law, the change of measure and ruin()'s
behaviour. Headline figures against closed forms are in tests/reference/test_ruin_reference.py."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import integrate, linalg, special, stats

from core import (
    Exponential,
    Gamma,
    IntegratedTail,
    Lognormal,
    MethodError,
    ParameterError,
    Pareto,
    Precision,
    SurplusProcess,
    Weibull,
)
from core.ruin.api import ruin
from core.ruin.geometric import geometric_sum
from core.ruin.measure import claim_tilt, siegmund_tilt
from core.ruin.paths import PathPlan, passage_values
from core.severities import Capped, GeneralizedPareto, PhaseType

EXP = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1)
SMALL = Precision(samples=2000)


def _quad(fn, a: float, b: float) -> float:
    return float(integrate.quad(fn, a, b, limit=500, epsabs=0.0, epsrel=1e-12)[0])


# ---------------------------------------------------------------------------- the process


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        ({"claim_rate": 0.0, "loading": 0.1}, "claim_rate"),
        ({"claim_rate": -1.0, "loading": 0.1}, "claim_rate"),
        ({"claim_rate": 1.0}, "loading"),
        ({"claim_rate": 1.0, "loading": 0.1, "premium_rate": 2.0}, "loading"),
        ({"claim_rate": 1.0, "loading": -1.0}, "loading"),
        ({"claim_rate": 1.0, "premium_rate": 0.0}, "premium_rate"),
        ({"claim_rate": 1.0, "loading": 0.1, "retention": 0.0}, "retention"),
    ],
)
def test_process_rejects_bad_arguments_naming_them(kwargs, name):
    with pytest.raises(ParameterError) as info:
        SurplusProcess(severity=Exponential(mean=1.0), **kwargs)
    assert info.value.parameter == name


def test_process_needs_a_finite_mean_claim_unless_capped():
    with pytest.raises(ParameterError) as info:
        SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=0.9, scale=1.0), loading=0.2)
    assert info.value.parameter == "severity"
    capped = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=0.9, scale=1.0), loading=0.2,
                            retention=50.0)
    assert math.isfinite(capped.premium)


def test_premium_from_loading_uses_the_net_claim():
    # c = (1 + theta) lambda E[min(X, r)]; E[min(X, r)] = mean (1 - e^{-r/mean}) (exponential)
    p = SurplusProcess(claim_rate=2.0, severity=Exponential(mean=3.0), loading=0.25,
                       retention=4.0)
    assert p.premium == pytest.approx(1.25 * 2.0 * 3.0 * -math.expm1(-4.0 / 3.0), rel=1e-12)
    assert p.rho == pytest.approx(1.0 / 1.25, rel=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        ({"capitals": []}, "capital"),
        ({"capitals": [1.0, -1.0]}, "capital.1"),
        ({"capitals": [math.inf]}, "capital.0"),
        ({"capitals": [1.0], "horizon": 0.0}, "horizon"),
        ({"capitals": [1.0], "horizon": math.inf}, "horizon"),
        ({"capitals": [1.0], "target_probability": 1.0}, "target_probability"),
        ({"capitals": [1.0], "method": "annealing"}, "method"),
    ],
)
def test_ruin_rejects_bad_requests_naming_the_field(kwargs, name):
    with pytest.raises(ParameterError) as info:
        ruin(EXP, **kwargs)
    assert info.value.parameter == name


def test_failed_net_profit_condition_gives_certain_ruin_without_simulation():
    # Common practice (classical theory): with c <= lambda E[X] the surplus drifts to -inf.
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), premium_rate=1.0)
    res = ruin(p, [0.0, 100.0], target_probability=0.01, seed=1)
    assert [e.probability for e in res.estimates] == [1.0, 1.0]
    assert all(e.samples == 0 for e in res.estimates)
    assert res.stopped_by == "exact" and "net profit condition fails" in res.warnings[0]
    assert res.capital_for_target is not None and res.capital_for_target.capital is None


def test_failed_net_profit_condition_still_has_a_finite_horizon_answer_below_one():
    p = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=-0.1)
    res = ruin(p, [5.0], horizon=10.0, precision=SMALL, seed=2)
    est = res.estimates[0]
    assert est.samples == 2000 and 0.0 < est.probability < 1.0


@pytest.mark.parametrize(
    ("process", "horizon", "method"),
    [
        (SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2),
         None, "tilted"),
        (EXP, 10.0, "conditional_is"),
        (SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2,
                        retention=5.0), 10.0, "conditional"),
    ],
)
def test_methods_that_do_not_apply_raise_method_error(process, horizon, method):
    with pytest.raises(MethodError):
        ruin(process, [1.0], horizon=horizon, method=method, precision=SMALL, seed=1)


# ---------------------------------------------------------------------------- Lundberg


def test_exponential_adjustment_coefficient_and_constant_match_closed_form():
    # gamma = theta / ((1 + theta) mean), C = 1 / (1 + theta) (classical closed form)
    res = ruin(EXP, [1.0], precision=SMALL, seed=3)
    assert res.adjustment_coefficient == pytest.approx(0.1 / 1.1, rel=1e-12)
    assert res.lundberg_constant == pytest.approx(1.0 / 1.1, rel=1e-10)
    assert res.estimates[0].approximation == pytest.approx(math.exp(-0.1 / 1.1) / 1.1, rel=1e-10)


def test_phase_type_adjustment_coefficient_solves_the_matrix_lundberg_equation():
    # M(r) = alpha (-r I - T)^-1 t for a phase-type law (scipy.linalg.solve); lambda (M - 1) = c r
    alpha, sub = np.array([0.3, 0.7]), np.array([[-0.5, 0.2], [0.0, -3.0]])
    p = SurplusProcess(claim_rate=2.0, severity=PhaseType(alpha=alpha, T=sub), loading=0.3)
    gamma = ruin(p, [1.0], precision=SMALL, seed=4).adjustment_coefficient
    mgf = alpha @ linalg.solve(-gamma * np.eye(2) - sub, -sub.sum(axis=1))
    assert 2.0 * (mgf - 1.0) == pytest.approx(p.premium * gamma, rel=1e-9)


def test_siegmund_estimates_obey_lundbergs_inequality():
    # Lundberg's inequality psi(u) <= exp(-gamma u): every contribution exp(-gamma S_tau) is
    # below it, so the estimate is too (exact tilt).
    res = ruin(EXP, [0.0, 5.0, 20.0, 60.0], precision=SMALL, seed=5)
    gamma = res.adjustment_coefficient
    for e in res.estimates:
        assert e.probability <= math.exp(-gamma * e.capital) * (1 + 1e-12)


def test_stepwise_root_solves_the_stepwise_lundberg_equation():
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2,
                       retention=10.0)
    res = ruin(p, [1.0], precision=SMALL, seed=6)
    tilt = siegmund_tilt(p, res.adjustment_coefficient)
    assert tilt is not None and tilt.step is not None
    assert p.claim_rate * math.expm1(tilt.log_w) == pytest.approx(p.premium * tilt.a, rel=1e-10)
    assert tilt.a == pytest.approx(res.adjustment_coefficient, rel=1e-3)


@pytest.mark.parametrize("steeper", [False, True])
def test_path_likelihood_ratio_has_mean_one_after_a_fixed_number_of_claims(steeper):
    # dP/dQ restricted to the first n claims is a likelihood ratio: E_Q[dP/dQ] = 1 exactly.
    # Capital 'infinite' so no path stops; n = 8 claims; stepwise tilt of a capped claim.
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2,
                       retention=10.0)
    gamma = ruin(p, [1.0], precision=SMALL, seed=7).adjustment_coefficient
    tilt = claim_tilt(p.net_severity, 3.0 * gamma) if steeper else siegmund_tilt(p, gamma)
    rng = np.random.default_rng(8)
    n, m = 8, 200_000
    _claims, log_fg = tilt.sample(n * m, rng)
    gaps = rng.standard_exponential((m, n)) / (p.claim_rate * math.exp(tilt.log_w))
    drift = p.claim_rate * math.expm1(tilt.log_w)
    lr = np.exp((log_fg.reshape(m, n) - tilt.log_w + drift * gaps).sum(axis=1))
    assert abs(lr.mean() - 1.0) <= 4.0 * lr.std() / math.sqrt(m)


def test_first_passage_recording_matches_a_plain_claim_by_claim_loop():
    # The vectorised passage search against a direct loop over one path's claims.
    tilt = siegmund_tilt(EXP, 0.1 / 1.1)
    u = np.array([0.0, 3.0, 7.5, 20.0])
    plan = PathPlan.build(EXP, tilt, u, math.inf)
    got = passage_values(plan, 5, np.random.default_rng(9))
    rng = np.random.default_rng(9)
    k = plan.steps
    active = list(range(5))
    s, lr, want = np.zeros(5), np.zeros(5), np.zeros((5, u.size))
    passed = np.zeros((5, u.size), bool)
    while active:
        claims, log_fg = tilt.sample(len(active) * k, rng)
        gaps = rng.standard_exponential((len(active), k)) / plan.arrival_rate
        drift = EXP.claim_rate * math.expm1(tilt.log_w)
        for row, path in enumerate(active):
            for step in range(k):
                s[path] += claims[row * k + step] - EXP.premium * gaps[row, step]
                lr[path] += log_fg[row * k + step] - tilt.log_w + drift * gaps[row, step]
                fresh = (s[path] > u) & ~passed[path]
                want[path, fresh] = np.exp(lr[path] + tilt.a * u[fresh])
                passed[path] |= fresh
        active = [i for i in active if not passed[i].all()]
    np.testing.assert_allclose(got, want, rtol=1e-9)


# ---------------------------------------------------------------------------- integrated tail

BASES = [
    Lognormal(mu=-0.5, sigma=1.0),
    Pareto(alpha=3.0, scale=2.0),
    Weibull(shape=0.5, scale=1.0),
    Weibull(shape=1.7, scale=2.0),
    Gamma(shape=2.5, scale=1.5),
    GeneralizedPareto(xi=0.3, scale=2.0),
    Exponential(mean=2.0),
    PhaseType(alpha=[0.3, 0.7], T=[[-1.0, 0.5], [0.0, -3.0]]),
    Capped(base=Pareto(alpha=3.0, scale=2.0), cap=5.0),
]
BASE_IDS = [repr(b) for b in BASES]


@pytest.mark.parametrize("base", BASES, ids=BASE_IDS)
def test_integrated_tail_sf_pdf_and_mean_match_quadrature(base):
    # sf_I(x) = int_x^inf sf(t) dt / mean, f_I = sf / mean, E[I] = E[X^2] / (2 mean)
    # (definition; scipy.integrate.quad)
    law = IntegratedTail(base=base)
    mean = base.mean
    for x in [0.01, 0.5, 2.0, 4.9, 12.0]:
        ref = _quad(lambda t: float(base.sf(t)), x, base.support_max) / mean
        assert law.sf(x) == pytest.approx(ref, rel=1e-9, abs=1e-300)
        assert law.pdf(x) == pytest.approx(float(base.sf(x)) / mean, rel=1e-12, abs=1e-300)
    assert law.mean == pytest.approx(base.moment(2) / (2.0 * mean), rel=1e-9)
    assert law.lev(3.0) == pytest.approx(_quad(lambda t: float(law.sf(t)), 0.0, 3.0), rel=1e-9)


def test_integrated_tail_of_lomax_is_lomax_with_alpha_minus_one():
    # Integrated tail of Lomax(alpha, s) is Lomax(alpha - 1, s) (closed form; scipy.stats.lomax)
    law = IntegratedTail(base=Pareto(alpha=3.0, scale=2.0))
    x = np.array([0.1, 10.0, 1e6, 1e150])
    np.testing.assert_allclose(law.logsf(x), stats.lomax(c=2.0, scale=2.0).logsf(x), rtol=1e-13)


def test_integrated_tail_far_tails_stay_in_log_space():
    # Weibull(k, s): sf_I(x) = Q(1/k, (x/s)^k) (scipy.special.gammaincc, away from underflow);
    # lognormal and gamma: int_x^inf sf(t) dt with t = x e^v, the integrand scaled by sf(x)
    # (scipy.integrate.quad).
    wb = IntegratedTail(base=Weibull(shape=0.5, scale=1.0))
    assert wb.logsf(900.0) == pytest.approx(math.log(special.gammaincc(2.0, 30.0)), rel=1e-12)
    for base, x in [(Lognormal(mu=-0.5, sigma=1.0), 1e12), (Gamma(shape=2.5, scale=1.5), 900.0)]:
        log_sf = float(base.logsf(x))

        def scaled(v: float, base=base, x=x, log_sf=log_sf) -> float:
            t = x * math.exp(v)
            return t * math.exp(float(base.logsf(t)) - log_sf)

        edges = [0.0, 1e-4, 1e-3, 1e-2, 0.1, 1.0, 5.0]
        total = sum(_quad(scaled, a, b) for a, b in itertools.pairwise(edges))
        ref = math.log(total) + log_sf - math.log(base.mean)
        got = IntegratedTail(base=base).logsf(x)
        assert ref < -200 and got == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize("base", BASES, ids=BASE_IDS)
def test_integrated_tail_quantiles_invert_the_survival_function(base):
    law = IntegratedTail(base=base)
    # a bounded law's far quantiles crowd below its top, beyond float resolution: stop at 1e-6
    far = [1e-12, 1e-200] if math.isinf(base.support_max) else [1e-6]
    q = np.array([0.999, 0.5, 1e-3, *far])
    np.testing.assert_allclose(law.sf(law.isf(q)), q, rtol=1e-9)


@pytest.mark.parametrize("base", BASES, ids=BASE_IDS)
def test_integrated_tail_samples_follow_the_law(base):
    # Kolmogorov-Smirnov against the quadrature-checked cdf (scipy.stats.kstest), fixed seed.
    law = IntegratedTail(base=base)
    draws = law.sample(4000, np.random.default_rng(11))
    assert stats.kstest(draws, law.cdf).pvalue > 1e-3


def test_integrated_tail_needs_a_finite_mean():
    with pytest.raises(ParameterError) as info:
        IntegratedTail(base=Pareto(alpha=1.0, scale=1.0))
    assert info.value.parameter == "base"


# ---------------------------------------------------------------------------- geometric count


def test_pollaczek_khinchine_count_is_geometric_with_working_tilt_and_size_bias():
    # P(N = n) = (1 - rho) rho^n; size-biased minus one: (n + 1) p_{n+1} / E[N]; tilted by s:
    # geometric with rho e^s (definitions).
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    rho = p.rho
    law = geometric_sum(p).lines[0].count
    n = np.arange(0, 40)
    np.testing.assert_allclose(law.pmf(n), (1 - rho) * rho**n, rtol=1e-12)
    np.testing.assert_allclose(law.size_biased_minus_one().pmf(n),
                               (n + 1) * (1 - rho) * rho ** (n + 1) / law.mean, rtol=1e-10)
    s = 0.1
    np.testing.assert_allclose(law.tilted(s).pmf(n),
                               (1 - rho * math.exp(s)) * (rho * math.exp(s)) ** n, rtol=1e-10)


# ---------------------------------------------------------------------------- behaviour of ruin()


def test_same_seed_same_answer_and_other_seed_other_answer():
    a = ruin(EXP, [10.0], precision=SMALL, seed=21).estimates[0].probability
    b = ruin(EXP, [10.0], precision=SMALL, seed=21).estimates[0].probability
    c = ruin(EXP, [10.0], precision=SMALL, seed=22).estimates[0].probability
    assert a == b and a != c


def test_one_sample_set_serves_every_capital_in_any_order():
    # Common random numbers: the estimate at a capital does not depend on the other capitals.
    one = ruin(EXP, [5.0, 25.0], precision=SMALL, seed=23).estimates
    two = ruin(EXP, [25.0, 5.0], precision=SMALL, seed=23).estimates
    assert one[0].probability == two[1].probability and one[1].probability == two[0].probability


def test_heavy_tails_report_the_subexponential_asymptotic_and_no_gamma():
    p = SurplusProcess(claim_rate=1.0, severity=Pareto(alpha=3.0, scale=2.0), loading=0.2)
    res = ruin(p, [50.0], method="conditional", precision=SMALL, seed=24)
    rho = 1 / 1.2
    # rho / (1 - rho) sf_I(u), sf_I the Lomax(2, 2) survival function (closed form)
    assert res.adjustment_coefficient is None and res.lundberg_constant is None
    assert res.estimates[0].approximation == pytest.approx(rho / (1 - rho) * 26.0**-2, rel=1e-12)
    assert "Pollaczek-Khinchine" in res.method_reason and res.method == "conditional"


def test_capital_for_a_target_above_rho_is_zero():
    # psi(0) = rho = lambda mu / c for every claim law (Pollaczek-Khinchine), and psi decreases.
    res = ruin(EXP, [1.0], target_probability=0.95, precision=SMALL, seed=25)
    assert res.capital_for_target.capital == 0.0


def test_time_limit_stops_the_run_and_says_so():
    res = ruin(EXP, [200.0], precision=Precision(samples=10_000_000, time_limit_s=0.05), seed=26)
    assert res.stopped_by == "time_limit"
    assert res.estimates[0].samples < 10_000_000
    assert any("time limit" in w for w in res.warnings)


def test_a_retention_no_claim_reaches_leaves_the_process_unchanged():
    # P(X > 1e18) = e^-1e18 = 0 in double precision, so min(X, 1e18) is X (a fact of the
    # model): the answer is the uncapped one, where the capped law's stepwise tilt overflowed
    # (OverflowError, a 500 over HTTP).
    capped = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.1,
                            retention=1e18)
    assert capped.net_severity is capped.severity
    got = ruin(capped, [1.0], horizon=10.0, precision=Precision(samples=2_000), seed=4)
    want = ruin(EXP, [1.0], horizon=10.0, precision=Precision(samples=2_000), seed=4)
    assert got.estimates[0].value == want.estimates[0].value
