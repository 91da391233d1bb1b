"""Ruin probabilities of the classical compound Poisson surplus process."""

from core.results import CapitalForTarget, RuinEstimate, RuinResult
from core.ruin.api import RUIN_METHODS, ruin
from core.ruin.process import SurplusProcess

__all__ = [
    "RUIN_METHODS",
    "CapitalForTarget",
    "RuinEstimate",
    "RuinResult",
    "SurplusProcess",
    "ruin",
]
