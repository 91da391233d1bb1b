"""Issue 12: no figure outside what the quantity can be, and no silent zero-width Monte Carlo."""

from __future__ import annotations

import math

import pytest
from scipy import stats

from core import (
    Gamma,
    Line,
    Lognormal,
    ParameterError,
    Poisson,
    Portfolio,
    Precision,
    SurplusProcess,
)
from core.exceedance import exceedance
from core.invariants import check_probability
from core.results import Diagnostics, ExceedanceEstimate
from core.ruin.api import ruin


def _diag() -> Diagnostics:
    return Diagnostics(pareto_k=None, effective_samples=1e4, largest_share=1e-4,
                       batch_ratio=None, reliable=True, reason="ok")


def _estimate(value: float, low: float, high: float, se: float | None) -> ExceedanceEstimate:
    return ExceedanceEstimate(threshold=1.0, value=value, std_error=se, relative_error=None,
                              ci_low=low, ci_high=high, samples=10_000, hits=10_000,
                              diagnostics=_diag())


def test_probability_above_one_is_flagged_and_clipped_when_an_estimator_returns_it():
    out, notes = check_probability(_estimate(1.39, 1.36, 1.39, 0.01))
    assert not out.diagnostics.reliable and "not a probability" in out.diagnostics.reason
    assert 0.0 <= out.ci_low <= out.value <= out.ci_high <= 1.0
    assert notes


def test_reversed_interval_is_flagged():
    out, _ = check_probability(_estimate(0.5, 0.6, 0.4, 0.01))
    assert not out.diagnostics.reliable and "reversed" in out.diagnostics.reason


def test_all_hits_with_zero_spread_gets_a_one_sided_bound_not_a_zero_width_interval():
    out, notes = check_probability(_estimate(1.0, 1.0, 1.0, 0.0))
    # rule of three mirrored: 0.05^(1/n) (common practice)
    assert out.ci_low == pytest.approx(0.05 ** (1 / 10_000)) and out.ci_high == 1.0
    assert out.std_error is None and notes


@pytest.mark.parametrize("severity", [Lognormal(mu=0.0, sigma=1e-17),
                                      Lognormal(mu=3.0, sigma=1e-12),
                                      Gamma(shape=1e-300, scale=1.0),
                                      Gamma(shape=0.01, scale=1.0)])
def test_claim_laws_double_precision_cannot_sample_are_refused(severity):
    with pytest.raises(ParameterError) as err:
        Line(count=Poisson(mean=5.0), severity=severity)
    assert err.value.parameter == "severity"


@pytest.mark.parametrize("method", ["conditional", "conditional_is", "auto"])
def test_nearly_constant_claims_give_the_poisson_law(method):
    # Claims 1 +- 1e-7: S = N to 7 digits; reference scipy.stats.poisson (P(S > x) = P(N > x)
    # away from the integers).
    port = Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0,
                                                                            sigma=1e-7))])
    xs = [5.0001, 2.5, 0.5, 9.5]
    res = exceedance(port, xs, method=method, precision=Precision(samples=20_000), seed=5)
    for x, e in zip(xs, res.estimates, strict=True):
        truth = float(stats.poisson.sf(math.floor(x), 5.0))
        assert 0.0 <= e.ci_low <= e.value <= e.ci_high <= 1.0
        if e.diagnostics.reliable:
            assert e.std_error is not None and abs(e.value - truth) <= 4 * e.std_error + 1e-6


def test_certain_ruin_is_marked_exact():
    proc = SurplusProcess(claim_rate=1.0, severity=Gamma(shape=2.0, scale=1.0), loading=-0.1)
    res = ruin(proc, [10.0], seed=1)
    assert res.estimates[0].value == 1.0 and res.estimates[0].diagnostics.exact


def test_ruin_with_a_horizon_never_reports_a_zero_width_monte_carlo_interval():
    proc = SurplusProcess(claim_rate=1.0, severity=Gamma(shape=2.0, scale=1.0), loading=-0.5)
    res = ruin(proc, [0.0, 1.0], horizon=200.0, precision=Precision(samples=5_000), seed=2)
    for e in res.estimates:
        assert not e.diagnostics.exact
        assert e.ci_low < e.ci_high and e.ci_low <= e.value <= e.ci_high <= 1.0


def test_dependent_exceedance_passes_the_invariants(monkeypatch):
    # A dependent estimator whose figure leaves its own interval is flagged and clipped like
    # any other (core.invariants), and auto retries it with the next candidate.
    import dataclasses

    import numpy as np

    from core.dependence import exceed
    from core.dependence.copula import Copula

    real = exceed._estimates

    def broken(x, group, stats_, samples, name):
        out = real(x, group, stats_, samples, name)
        if name != "crude":
            return out
        return [(i, dataclasses.replace(e, value=1.5, ci_high=1.2)) for i, e in out]

    monkeypatch.setattr(exceed, "_estimates", broken)
    lines = [Line(count=Poisson(mean=3.0), severity=Gamma(shape=2.0, scale=1.0)),
             Line(count=Poisson(mean=2.0), severity=Lognormal(mu=0.0, sigma=1.0))]
    pf = Portfolio(lines=lines, dependence=Copula(kind="gaussian",
                                                  correlation=np.array([[1, .5], [.5, 1]])))
    res = exceedance(pf, [10.0], method="crude", precision=Precision(samples=5_000), seed=2)
    e = res.estimates[0]
    assert e.value == 1.0 and not e.diagnostics.reliable
    assert "invariant violated" in e.diagnostics.reason
    assert math.isfinite(res.std_dev)


def test_zero_spread_below_one_is_widened_by_the_no_hit_rule_and_flagged():
    out, notes = check_probability(_estimate(0.25, 0.25, 0.25, 0.0))
    # every one of n contributions in [0, 1] equalled 0.25: the share that would differ is at
    # most 1 - 0.05^(1/n) (Clopper-Pearson for zero hits, common practice)
    b = 1.0 - 0.05 ** (1 / 10_000)
    assert out.ci_low == pytest.approx(0.25 * (1 - b)) and out.ci_high == pytest.approx(
        0.25 + 0.75 * b)
    assert out.std_error is None and not out.diagnostics.reliable and notes


def test_retention_of_1e18_gives_no_zero_width_interval():
    # Pareto(2, scale 1) past 1e18: a claim pays with probability 1e-36 (closed form
    # (1/1e18)^2), so P(S > 0) = 1 - exp(-5e-36) = 5e-36 for a Poisson(5) count.
    from core import Pareto

    port = Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Pareto(alpha=2.0, scale=1.0),
                                 retention=1e18)])
    res = exceedance(port, [0.0], precision=Precision(samples=2_000), seed=1)
    e = res.estimates[0]
    truth = -math.expm1(-5.0 * 1e-36)
    assert e.ci_low < e.ci_high and e.ci_low <= truth <= e.ci_high
    assert not e.diagnostics.exact and (e.std_error is None or e.std_error > 0)
    if e.std_error is None:
        assert not e.diagnostics.reliable


def test_layer_attachment_probability_above_one_is_clipped_and_flagged():
    # Found by the property tests: a layer's P(S > attachment) of 1.023 was flagged but sent
    # as is; a probability is in [0, 1] (a fact of the quantity), so it is clipped as well.
    from core.invariants import check_tail
    from core.results import Interval, LayerEstimate

    attach = Interval(value=1.0234, ci_low=0.9007, ci_high=1.0, std_error=0.0626)
    layer = LayerEstimate(attachment=0.0, limit=1.0,
                          expected_loss=Interval(value=0.5, ci_low=0.4, ci_high=0.6,
                                                 std_error=0.05),
                          probability_attach=attach, probability_exhaust=None,
                          diagnostics=_diag())
    _, (out,), notes = check_tail([], [layer])
    p = out.probability_attach
    assert 0.0 <= p.ci_low <= p.value <= p.ci_high <= 1.0
    assert not out.diagnostics.reliable and notes
