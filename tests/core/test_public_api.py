"""The public surface of the core, pinned (the httpx pattern): adding or removing an exported
name is a decision, made by editing this list."""

from __future__ import annotations

import importlib
import types

import core

PUBLIC = [
    "ENGINE_VERSION",
    "METHODS",
    "RUIN_METHODS",
    "Binomial",
    "CapitalForTarget",
    "Capped",
    "ClaimCount",
    "Diagnostics",
    "ExceedanceEstimate",
    "ExceedanceResult",
    "Excess",
    "Exponential",
    "Fixed",
    "Gamma",
    "GeneralizedPareto",
    "IntegratedTail",
    "Interval",
    "Layer",
    "LayerEstimate",
    "LimitError",
    "Line",
    "Lognormal",
    "MeasureEstimate",
    "MethodError",
    "NegativeBinomial",
    "Normal",
    "ParameterError",
    "Pareto",
    "PhaseType",
    "Poisson",
    "Portfolio",
    "Precision",
    "RuinEstimate",
    "RuinResult",
    "Severity",
    "SurplusProcess",
    "TailResult",
    "TailgaugeError",
    "Weibull",
    "estimate_exceedance",
    "ruin_probability",
    "tail_estimates",
]


def test_core_exports_exactly_the_pinned_names() -> None:
    assert core.__all__ == PUBLIC
    for name in PUBLIC:
        assert hasattr(core, name), name


def test_no_exported_name_shadows_a_submodule() -> None:
    for name in ("exceedance", "ruin", "measures", "severities", "results"):
        module = importlib.import_module(f"core.{name}")
        assert isinstance(getattr(core, name), types.ModuleType)
        assert getattr(core, name) is module
    api = importlib.import_module("core.ruin.api")
    assert callable(api.ruin)
