"""What a risk-measure request asks about: levels, aggregate layers, and a first guess of VaR
that places the estimation grid (shared by the Monte Carlo and the recursion measures)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

from core.errors import ParameterError
from core.portfolio import Portfolio
from core.validate import finite_numbers


@dataclass(frozen=True, kw_only=True)
class Layer:
    """An aggregate layer: pays min((S - attachment)+, limit); limit None = unlimited."""

    attachment: float
    limit: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.attachment) and self.attachment >= 0):
            raise ParameterError("attachment", f"must be finite and >= 0, got {self.attachment}")
        if self.limit is not None and not (math.isfinite(self.limit) and self.limit > 0):
            raise ParameterError("limit", f"must be finite and > 0 (or null), got {self.limit}")


def check_levels(levels: Sequence[float]) -> np.ndarray:
    q = finite_numbers("levels", levels)
    for i, v in enumerate(q):
        if not (0.0 < v < 1.0):
            raise ParameterError(f"levels.{i}", f"must be strictly between 0 and 1, got {v}")
    return q


def guess_var(portfolio: Portfolio, q: float) -> float:
    """A rough VaR for placing the pilot grid: the larger of a normal approximation and the
    single-loss approximation (Boecker and Klueppelberg 2005) of the heaviest line."""
    guess = portfolio.mean + float(stats.norm.isf(1.0 - q)) * portfolio.std_dev
    for line in portfolio.lines:
        lam = line.paid_count.mean
        if lam > 0 and line.paid_severity.tail == "heavy":
            p = min((1.0 - q) / lam, 0.5)
            guess = max(guess, float(line.paid_severity.isf(p)) + portfolio.mean)
    return float(guess) if math.isfinite(guess) else float(portfolio.mean * 10)
