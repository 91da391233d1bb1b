"""tailgauge core: portfolio loss models and variance-reduced tail estimators.

Pure computation (numpy and scipy only); the service layer wraps it over HTTP.

The entry points are exported under names of their own (estimate_exceedance, tail_estimates,
ruin_probability) so that no exported name shadows a submodule: `core.exceedance` and
`core.ruin` stay modules. tests/core/test_public_api.py pins `__all__`.
"""

from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.errors import LimitError, MethodError, ParameterError, TailgaugeError
from core.exceedance import METHODS
from core.exceedance import exceedance as estimate_exceedance
from core.integrated_tail import IntegratedTail
from core.levels import Layer
from core.measures import tail_estimates
from core.portfolio import Line, Portfolio
from core.precision import Precision
from core.results import (
    CapitalForTarget,
    Diagnostics,
    ExceedanceEstimate,
    ExceedanceResult,
    Interval,
    LayerEstimate,
    MeasureEstimate,
    RuinEstimate,
    RuinResult,
    TailResult,
)
from core.ruin.api import RUIN_METHODS
from core.ruin.api import ruin as ruin_probability
from core.ruin.process import SurplusProcess
from core.severities import (
    Capped,
    Excess,
    Exponential,
    Gamma,
    GeneralizedPareto,
    Lognormal,
    Normal,
    Pareto,
    PhaseType,
    Severity,
    Weibull,
)
from core.version import ENGINE_VERSION

__all__ = [
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
