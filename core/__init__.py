"""tailgauge core: portfolio loss models and variance-reduced tail estimators.

Pure computation (numpy and scipy only); the service layer wraps it over HTTP.
"""

from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.errors import LimitError, MethodError, ParameterError, TailgaugeError
from core.exceedance import METHODS, exceedance
from core.integrated_tail import IntegratedTail
from core.portfolio import Line, Portfolio
from core.precision import Precision
from core.results import Diagnostics, ExceedanceEstimate, ExceedanceResult
from core.ruin import (
    RUIN_METHODS,
    CapitalForTarget,
    RuinEstimate,
    RuinResult,
    SurplusProcess,
    ruin,
)
from core.severities import (
    Capped,
    Excess,
    Exponential,
    Gamma,
    GeneralizedPareto,
    Lognormal,
    Normal,
    Pareto,
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
    "LimitError",
    "Line",
    "Lognormal",
    "MethodError",
    "NegativeBinomial",
    "Normal",
    "ParameterError",
    "Pareto",
    "Poisson",
    "Portfolio",
    "Precision",
    "RuinEstimate",
    "RuinResult",
    "Severity",
    "SurplusProcess",
    "TailgaugeError",
    "Weibull",
    "exceedance",
    "ruin",
]
