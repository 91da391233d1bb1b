"""A portfolio with no claims (fixed n = 0): S = 0 surely, so every figure is exact."""

from __future__ import annotations

import pytest

import core
from core import measures


def _nothing() -> core.Portfolio:
    return core.Portfolio(lines=[core.Line(count=core.Fixed(n=0), severity=core.Exponential(
        mean=1.0))])


@pytest.mark.parametrize("method", ["auto", "crude", "tilted", "conditional", "conditional_is",
                                    "recursion"])
def test_exceedance_of_a_surely_zero_loss_is_exact_for_every_method(method: str) -> None:
    # S = 0 with probability one (a fact of the model, no reference needed): P(S > x) is the
    # indicator of x < 0, with no sampling error at all.
    result = core.estimate_exceedance(_nothing(), [-1.0, 0.0, 5.0], method=method, seed=3)
    assert (result.method, result.stopped_by) == ("exact", "exact")
    assert [(e.value, e.ci_low, e.ci_high, e.samples) for e in result.estimates] == [
        (1.0, 1.0, 1.0, 0), (0.0, 0.0, 0.0, 0), (0.0, 0.0, 0.0, 0)]


@pytest.mark.parametrize("method", ["auto", "conditional", "recursion"])
def test_measures_and_layers_of_a_surely_zero_loss_are_zero(method: str) -> None:
    result = measures.tail_estimates(
        _nothing(), levels=[0.5, 0.995], losses=[-2.0, 0.0],
        layers=[measures.Layer(attachment=0.0, limit=3.0), measures.Layer(attachment=1.0)],
        method=method, seed=3,
    )
    assert result.stopped_by == "exact"
    assert [(m.var.value, m.tvar.value) for m in result.measures] == [(0.0, 0.0), (0.0, 0.0)]
    assert [p.value for p in result.loss_exceedance] == [1.0, 0.0]
    assert [(ly.expected_loss.value, ly.probability_attach.value) for ly in result.layers] == [
        (0.0, 0.0), (0.0, 0.0)]
    assert result.layers[1].probability_exhaust is None  # unlimited layer


@pytest.mark.parametrize("method", ["auto", "crude", "recursion"])
def test_levels_below_the_atom_at_zero_have_var_zero_and_tvar_in_closed_form(
        method: str) -> None:
    # Found by the property tests: Poisson(0.2) claims, P(S = 0) = e^-0.2 = 0.819 > 0.5, so
    # VaR_0.5 = inf{x : F(x) >= 0.5} = 0; it was reported as the grid's top edge (3.55, above
    # VaR_0.9). References: P(S = 0) from scipy.stats.poisson.pmf(0); TVaR_q = E[S] / (1 - q)
    # below the atom (Acerbi and Tasche 2002, TVaR as the average of VaR_u over u > q), with
    # E[S] = lambda exp(mu + sigma^2 / 2) (lognormal mean, closed form).
    import math

    from scipy import stats

    line = core.Line(count=core.Poisson(mean=0.2), severity=core.Lognormal(mu=0.0, sigma=0.2))
    portfolio = core.Portfolio(lines=[line])
    p0 = float(stats.poisson.pmf(0, 0.2))
    levels = [0.5, p0, 0.9, 0.95]
    result = measures.tail_estimates(portfolio, levels=levels, method=method, seed=11)
    by_level = {m.level: m for m in result.measures}
    mean = 0.2 * math.exp(0.02)
    for q in (0.5, p0):
        m = by_level[q]
        assert (m.var.value, m.var.ci_low, m.var.ci_high) == (0.0, 0.0, 0.0)
        assert m.tvar.value == pytest.approx(mean / (1.0 - q), rel=1e-12)
        assert m.diagnostics.exact and m.diagnostics.reliable
    # Above the atom the VaR is positive and rises with the level: one claim is almost
    # surely enough to pass 0.9 (P(N >= 2) = 0.0175 < 0.1), so VaR_0.9 is the lognormal
    # quantile of (0.9 - p0) / P(N = 1) given one claim, to first order (scipy.stats).
    assert 0.0 < by_level[0.9].var.value <= by_level[0.95].var.value
    one = float(stats.poisson.pmf(1, 0.2))
    approx = float(stats.lognorm.ppf((0.9 - p0) / one, 0.2))
    assert by_level[0.9].var.value == pytest.approx(approx, rel=0.02)
    # the order of the request's levels is kept
    assert [m.level for m in result.measures] == levels
