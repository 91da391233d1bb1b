"""Schema -> core translation, and core error paths -> request locations."""

from __future__ import annotations

import pytest

import core
from core.errors import LimitError, MethodError, ParameterError
from service import translate
from service.errors import error_type, problem
from service.schemas.common import (
    LineSpec,
    LognormalSeverity,
    PoissonCount,
    PortfolioSpec,
)


def test_every_family_and_kind_becomes_the_matching_core_object():
    spec = PortfolioSpec.model_validate({"lines": [
        {"count": {"kind": "fixed", "n": 2}, "severity": {"family": "lognormal", "mu": 1.0,
                                                          "sigma": 0.5}},
        {"count": {"kind": "poisson", "mean": 2.0},
         "severity": {"family": "pareto", "alpha": 3.0, "scale": 2.0}},
        {"count": {"kind": "negative_binomial", "mean": 2.0, "dispersion": 2.0},
         "severity": {"family": "weibull", "shape": 0.7, "scale": 3.0}},
        {"count": {"kind": "binomial", "trials": 10, "probability": 0.3},
         "severity": {"family": "gamma", "shape": 2.0, "scale": 1.5}},
        {"count": {"kind": "poisson", "mean": 1.0},
         "severity": {"family": "exponential", "mean": 4.0}, "retention": 1.0, "limit": 9.0},
        {"count": {"kind": "poisson", "mean": 1.0},
         "severity": {"family": "normal", "mean": 4.0, "sd": 1.0}},
        {"count": {"kind": "poisson", "mean": 1.0}, "label": "op",
         "severity": {"family": "generalized_pareto", "xi": 0.3, "scale": 1.0}},
    ]})
    model = translate.portfolio(spec)
    assert [type(line.count) for line in model.lines] == [
        core.Fixed, core.Poisson, core.NegativeBinomial, core.Binomial, core.Poisson,
        core.Poisson, core.Poisson,
    ]
    assert [type(line.severity) for line in model.lines] == [
        core.Lognormal, core.Pareto, core.Weibull, core.Gamma, core.Exponential, core.Normal,
        core.GeneralizedPareto,
    ]
    assert model.lines[0].severity == core.Lognormal(mu=1.0, sigma=0.5)
    assert model.lines[2].count == core.NegativeBinomial(mean=2.0, dispersion=2.0)
    assert (model.lines[4].retention, model.lines[4].limit) == (1.0, 9.0)
    assert model.lines[5].retention is None  # absent retention: claims paid as drawn
    assert model.lines[6].label == "op"


def test_core_error_while_building_names_the_request_path():
    # Bypass the schema's own checks to reach the core's.
    bad = LineSpec.model_construct(
        count=PoissonCount(kind="poisson", mean=1.0),
        severity=LognormalSeverity.model_construct(family="lognormal", mu=0.0, sigma=-1.0),
        retention=None, limit=None, label=None,
    )
    spec = PortfolioSpec.model_construct(lines=[LineSpec.model_validate(
        {"count": {"kind": "fixed", "n": 1}, "severity": {"family": "exponential", "mean": 1.0}}
    ), bad])
    with pytest.raises(ParameterError) as raised:
        translate.portfolio(spec)
    assert raised.value.loc == ("portfolio", "lines", 1, "severity", "sigma")
    assert problem(raised.value).detail[0]["loc"] == [
        "body", "portfolio", "lines", 1, "severity", "sigma",
    ]


def test_engine_paths_relative_to_the_portfolio_are_rebased():
    rebased = translate.engine_error_path(MethodError("lines[2].severity", "heavy"))
    assert (type(rebased), rebased.loc) == (MethodError, ("portfolio", "lines", 2, "severity"))
    kept = translate.engine_error_path(ParameterError("precision.samples", "x"))
    assert kept.loc == ("precision", "samples")


def test_error_types_name_the_kind_of_core_error():
    assert [error_type(e) for e in (ParameterError("a", "b"), MethodError("a", "b"),
                                    LimitError("a", "b"))] == [
        "parameter_error", "method_error", "limit_exceeded",
    ]
    # The dotted text core raise sites still use is split once, in core.errors, into a tuple.
    assert ParameterError("thresholds.3", "x").loc == ("thresholds", 3)
    assert ParameterError(("lines", 0, "severity"), "x").parameter == "lines[0].severity"
