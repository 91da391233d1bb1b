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
