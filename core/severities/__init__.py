"""Claim severity laws.

Every law is a small frozen object with a keyword-only constructor that validates its
parameters (`ParameterError` names the bad one). The base class `Severity` parses and
broadcasts arguments once and handles the ends of the support; each family writes only its
private formulas (`_logsf`, `_logpdf`, `_isf_log`, ...), evaluated strictly inside the support.

Far tails go through log space: `logsf` and `isf_log` stay finite and accurate where the
survival probability is 1e-300 or smaller, and sampling inverts in log space where a family has
no exact generator of its own.

Families: Lognormal, Pareto (Lomax), Weibull, Gamma, Exponential, Normal, GeneralizedPareto,
PhaseType, and the per-claim layer laws Excess (X - r given X > r) and Capped (min(X, c)).

The package splits infrastructure from families (the way scipy.stats does): `base` holds the
Severity class with its public API and numeric fallbacks, `heavy` and `light` the families,
`layers` the per-claim layer laws, `_numeric` the array plumbing and special functions.
"""

from core.severities.base import Severity
from core.severities.heavy import GeneralizedPareto, Lognormal, Pareto, Weibull
from core.severities.layers import Capped, Excess
from core.severities.light import Exponential, Gamma, Normal, PhaseType

__all__ = [
    "Capped",
    "Excess",
    "Exponential",
    "Gamma",
    "GeneralizedPareto",
    "Lognormal",
    "Normal",
    "Pareto",
    "PhaseType",
    "Severity",
    "Weibull",
]
