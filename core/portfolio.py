"""A portfolio of independent lines of business, each a compound sum of claims.

A per-claim layer (retention r, limit l) pays min(max(X - r, 0), l). It is modelled exactly by
thinning: only claims above the retention are paid, so the count of paid claims is the original
count thinned by P(X > r) and each paid claim is (X - r | X > r), capped at l. This keeps paid
claims free of an atom at zero, which the conditional estimators need.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from core.counts import ClaimCount
from core.dependence.copula import Copula
from core.errors import ParameterError
from core.severities import Capped, Excess, Severity


def _check_finite(name: str, value: float, *, positive: bool, allow_zero: bool) -> None:
    if not math.isfinite(value):
        raise ParameterError(name, f"must be finite, got {value!r}")
    if positive and (value < 0 or (value == 0 and not allow_zero)):
        bound = ">= 0" if allow_zero else "> 0"
        raise ParameterError(name, f"must be {bound}, got {value!r}")


# Claims whose interquartile range is below this share of their size are numerically constant:
# a double holds ~16 digits, so rounding then moves a claim by more than 1e-8 of its own spread
# and the conditional estimators' "which claim is the largest" partition breaks on ties (a
# lognormal with sigma 1e-17 draws 1.0 every time and gave exceedance probabilities above 1).
MIN_RELATIVE_SPREAD = 1e-8
# Claims below 1e-300 are close to the smallest normal double (2.2e-308) and are drawn as 0 by
# the samplers; a law that puts more than this much mass there (gamma shape 1e-300) is refused.
UNDERFLOW = 1e-300
MAX_UNDERFLOW_MASS = 1e-9


def _check_resolvable(sev: Severity) -> None:
    """Refuse a claim law that double precision cannot sample faithfully (see above)."""
    q25, q75 = (float(v) for v in sev.ppf(np.array([0.25, 0.75])))
    size = max(abs(q25), abs(q75))
    if math.isfinite(size) and size > 0 and (q75 - q25) <= MIN_RELATIVE_SPREAD * size:
        raise ParameterError(
            "severity",
            f"claims are numerically constant (quartiles {q25:.17g} and {q75:.17g}): their "
            f"spread is below {MIN_RELATIVE_SPREAD:g} of their size, which double precision "
            "cannot resolve; give a spread of at least that (e.g. lognormal sigma >= 1e-8)",
        )
    if sev.support_min >= 0.0:
        mass = float(sev.cdf(UNDERFLOW))
        if mass > MAX_UNDERFLOW_MASS:
            raise ParameterError(
                "severity",
                f"a claim falls below {UNDERFLOW:g} with probability {mass:.3g}: such claims "
                "are rounded to 0 in double precision, so the model cannot be sampled "
                "faithfully (raise the shape or the scale)",
            )


@dataclass(frozen=True, kw_only=True)
class Line:
    """One line of business: a claim count law, a severity and an optional per-claim layer."""

    count: ClaimCount
    severity: Severity
    retention: float | None = None
    limit: float | None = None
    label: str | None = None

    def __post_init__(self) -> None:
        _check_resolvable(self.severity)
        if self.retention is not None:
            _check_finite("retention", self.retention, positive=True, allow_zero=True)
        if self.limit is not None:
            _check_finite("limit", self.limit, positive=True, allow_zero=False)
        if self.retention is not None and self.severity.sf(self.retention) <= 0.0:
            raise ParameterError(
                "retention", "is at or beyond the top of the severity's support: no claim pays"
            )

    @property
    def paid_count(self) -> ClaimCount:
        """Law of the number of claims that pay something."""
        if self.retention is None:
            return self.count
        keep = float(self.severity.sf(self.retention))
        return self.count if keep >= 1.0 else self.count.thinned(keep)

    @property
    def paid_severity(self) -> Severity:
        """Law of one paid amount, given that the claim pays."""
        sev = self.severity
        if self.retention is not None:
            sev = Excess(base=sev, retention=self.retention)
        if self.limit is not None:
            sev = Capped(base=sev, cap=self.limit)
        return sev

    @property
    def mean(self) -> float:
        return self.paid_count.mean * self.paid_severity.mean

    @property
    def variance(self) -> float:
        # Compound sum: Var S = E[N] Var X + Var N (E X)^2.
        n, x = self.paid_count, self.paid_severity
        return n.mean * x.variance + n.variance * x.mean**2


@dataclass(frozen=True, kw_only=True)
class Portfolio:
    """Lines of business; S is the sum of their aggregate losses over one period.

    dependence: None (independent lines, as in version 1) or a copula coupling the lines'
    aggregate losses, each line keeping its own compound law as marginal.
    """

    lines: Sequence[Line]
    dependence: Copula | None = None

    def __post_init__(self) -> None:
        if len(self.lines) == 0:
            raise ParameterError("lines", "must hold at least one line")
        object.__setattr__(self, "lines", tuple(self.lines))
        dep = self.dependence
        if dep is not None and dep.dim != len(self.lines):
            raise ParameterError(
                "portfolio.dependence.correlation",
                f"must be {len(self.lines)} x {len(self.lines)} (one row and column per line), "
                f"got {dep.dim} rows")

    @property
    def mean(self) -> float:
        return math.fsum(line.mean for line in self.lines)

    @property
    def variance(self) -> float:
        return math.fsum(line.variance for line in self.lines)

    @property
    def std_dev(self) -> float:
        return math.sqrt(self.variance)

    @property
    def expected_claims(self) -> float:
        return math.fsum(line.paid_count.mean for line in self.lines)

    @property
    def is_light(self) -> bool:
        """True when every paid claim has a moment generating function near zero."""
        return all(line.paid_severity.tail == "light" for line in self.lines)
