"""The estimator registry: one object per method, and every method list derived from it."""

from __future__ import annotations

import ast
import typing
from pathlib import Path

import numpy as np
import pytest

import core
from core import Fixed, Gamma, Line, Lognormal, MethodError, ParameterError, Poisson, Portfolio
from core.estimators import registry
from core.estimators.estimator import Estimator, ModelKind
from core.streams import method_id
from service.schemas.common import Method, PortfolioMethod, RuinMethod

ROOT = Path(__file__).resolve().parents[2]


def light() -> Portfolio:
    return Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Gamma(shape=2.0, scale=1.0))])


def heavy() -> Portfolio:
    return Portfolio(lines=[Line(count=Fixed(n=3), severity=Lognormal(mu=0.0, sigma=1.0))])


def limited_heavy() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Fixed(n=3), severity=Lognormal(mu=0.0, sigma=1.0), limit=5.0)])


def test_every_method_list_is_the_registry() -> None:
    names = registry.names()
    assert names == ("crude", "tilted", "conditional", "conditional_is", "recursion",
                     "glasserman_li", "radial", "mean_shift")
    assert core.METHODS == ("auto", *names)
    assert set(core.RUIN_METHODS) <= set(core.METHODS)
    # The service schema's literals are built from the same lists: every portfolio request
    # takes every method (credit and dependent ones included), ruin those with a regime.
    assert typing.get_args(Method) == core.METHODS
    assert typing.get_args(PortfolioMethod) == core.METHODS
    assert typing.get_args(RuinMethod) == core.RUIN_METHODS


def test_each_kind_of_model_has_its_methods_from_the_registry() -> None:
    from core.credit import CREDIT_METHODS
    from core.dependence.engine import DEPENDENT_METHODS

    assert registry.serving(ModelKind.CLAIMS) == (
        "crude", "tilted", "conditional", "conditional_is", "recursion")
    assert CREDIT_METHODS == registry.serving(ModelKind.CREDIT) == ("crude", "glasserman_li")
    assert DEPENDENT_METHODS == registry.serving(ModelKind.DEPENDENT) == (
        "crude", "conditional", "conditional_is", "radial", "mean_shift")
    with pytest.raises(MethodError, match="does not apply to a portfolio with obligor"):
        registry.get_for(ModelKind.CREDIT, "tilted", "a portfolio with obligor groups")
    # The methods of one kind of model refuse the others at `method`.
    for name in ("glasserman_li", "radial", "mean_shift"):
        with pytest.raises(MethodError) as err:
            registry.get(name).plan(light(), np.array([10.0]), 1)
        assert err.value.loc == ("method",)


def test_each_estimator_has_its_own_random_streams() -> None:
    ids = [method_id(e.stream) for e in registry.estimators()]
    assert len(set(ids)) == len(ids)


def test_unknown_method_names_the_choices() -> None:
    with pytest.raises(ParameterError, match="must be one of auto, crude"):
        registry.get("bootstrap")


def test_candidates_follow_the_tails_of_the_model() -> None:
    assert registry.candidates(light()) == ["tilted", "crude"]
    assert registry.candidates(heavy()) == ["conditional", "conditional_is", "crude"]


def test_applies_says_which_estimators_serve_a_model() -> None:
    served = {e.name: e.applies(limited_heavy()) for e in registry.estimators()}
    # Tilting needs a light tail; a capped Lognormal is light, and conditioning needs a line
    # without a per-claim limit.
    assert served == {"crude": True, "tilted": True, "conditional": False,
                      "conditional_is": False, "recursion": True, "glasserman_li": False,
                      "radial": False, "mean_shift": False}
    with pytest.raises(MethodError):
        registry.get("conditional").check(limited_heavy())
    assert not registry.get("tilted").applies(heavy())


def test_no_module_chains_over_method_names() -> None:
    # Dispatch goes through the registry: no comparison of `method`/`name` with an estimator's
    # name outside its own module (auto, the chooser, is not an estimator).
    estimator_names = set(registry.names())
    offenders = []
    # core/credit and core/dependence dispatch through the registry too (ModelKind, each
    # estimator's serves / proposal / amount_sampler / dependent_rank / stream_for). A tuple
    # or list of names counts as much as a single one.
    # core/parameter_figures only asks whether a method name is one of core.METHODS.
    for path in sorted((ROOT / "core").rglob("*.py")):
        if path.name == "parameter_figures.py":
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Compare):
                for side in [node.left, *node.comparators]:
                    many = isinstance(side, ast.Tuple | ast.List | ast.Set)
                    items = side.elts if many else [side]
                    if any(isinstance(v, ast.Constant) and v.value in estimator_names
                           for v in items):
                        offenders.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert not offenders, offenders


def test_a_new_estimator_is_one_module() -> None:
    # Every registered estimator is discovered from its own module's ESTIMATOR.
    for est in registry.estimators():
        assert isinstance(est, Estimator)
        module = type(est).__module__
        assert module.startswith("core.estimators.")
