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


def largest_claim_var(portfolio: Portfolio, q: float) -> float:
    """A rigorous lower bound of VaR_q from the largest claim alone (0 when none applies).

    With independent lines of claims >= 0, S >= M (the largest claim) and P(S > v) >= P(M > v)
    = 1 - prod_j pgf_j(1 - sf_j(v)), so every v with P(M > v) > 1 - q lies below VaR_q. The
    largest such v is found by bisection; log pgf(1 - s) = log_mgf(log1p(-s)) keeps its digits
    far in the tail. Far in a heavy tail this single-loss figure is also close to VaR itself.
    """
    lines = portfolio.lines
    if portfolio.dependence is not None or any(
            float(ln.paid_severity.support_min) < 0.0 for ln in lines):
        return 0.0
    tail = 1.0 - q

    def p_max(v: float) -> float:
        log_none = 0.0
        for ln in lines:
            s = float(ln.paid_severity.sf(v))
            log_none += (float(ln.paid_count.log_mgf(math.log1p(-s))) if s < 1.0
                         else float(ln.paid_count.logpmf(0)))
        return -math.expm1(log_none)

    if not p_max(0.0) > tail:
        return 0.0
    # union bound: P(M > v) <= sum_j E[N_j] sf_j(v), so at hi P(M > hi) <= 1 - q
    share = tail / (len(lines) * max(max(float(ln.paid_count.mean) for ln in lines), 1e-300))
    hi = max(float(ln.paid_severity.isf(min(1.0, share))) for ln in lines)
    if not math.isfinite(hi) or p_max(hi) > tail:
        return 0.0
    lo = 0.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        lo, hi = (mid, hi) if p_max(mid) > tail else (lo, mid)
    return lo
