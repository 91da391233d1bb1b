"""The classical compound Poisson surplus process R_t = u + c t - (sum of claims up to t).

Claims arrive at rate lambda (claim_rate) and are drawn from a severity, optionally capped by a
per-claim retention: the insurer then keeps min(X, retention) (the reinsurer pays the excess).
The premium rate c is given directly or as a safety loading theta, c = (1 + theta) lambda E[claim].
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

from core.errors import ParameterError
from core.severities import Capped, Severity
from core.validate import real as _real

__all__ = ["SurplusProcess"]


@dataclass(frozen=True, kw_only=True)
class SurplusProcess:
    """Claim rate, claim severity, premium (as loading or premium_rate), optional retention."""

    claim_rate: float
    severity: Severity
    loading: float | None = None
    premium_rate: float | None = None
    retention: float | None = None

    def __post_init__(self) -> None:
        rate = _real("claim_rate", self.claim_rate)
        if not rate > 0:
            raise ParameterError("claim_rate", f"must be > 0, got {rate!r}")
        object.__setattr__(self, "claim_rate", rate)
        sev = self.severity
        if not isinstance(sev, Severity):
            raise ParameterError("severity", f"must be a Severity, got {type(sev).__name__}")
        if sev.support_min < 0:
            raise ParameterError(
                "severity", f"claims must be >= 0; the {sev.family} law reaches below 0"
            )
        if self.retention is not None:
            r = _real("retention", self.retention)
            if not r > sev.support_min:
                raise ParameterError("retention", f"must be > {sev.support_min!r}, got {r!r}")
            object.__setattr__(self, "retention", r)
        self._check_premium()

    def _check_premium(self) -> None:
        if (self.loading is None) == (self.premium_rate is None):
            raise ParameterError("loading", "give exactly one of loading and premium_rate")
        mean = self.mean_claim
        if not math.isfinite(mean):
            raise ParameterError(
                "severity",
                "the mean claim is infinite; ruin needs a finite mean claim (give a retention "
                "to cap each claim)",
            )
        if self.loading is not None:
            theta = _real("loading", self.loading)
            if not theta > -1:
                raise ParameterError("loading", f"must be > -1 (a positive premium), got {theta!r}")
            object.__setattr__(self, "loading", theta)
        else:
            c = _real("premium_rate", self.premium_rate)
            if not c > 0:
                raise ParameterError("premium_rate", f"must be > 0, got {c!r}")
            object.__setattr__(self, "premium_rate", c)

    @cached_property
    def net_severity(self) -> Severity:
        """The claim the insurer pays: min(X, retention) when a retention is given."""
        if self.retention is None or float(self.severity.sf(self.retention)) == 0.0:
            # No claim reaches the retention in double precision: min(X, r) is X itself. The
            # capped law would tilt a top cell reaching r (e^{a r} overflowed at r = 1e18).
            return self.severity
        return Capped(base=self.severity, cap=self.retention)

    @property
    def mean_claim(self) -> float:
        return float(self.net_severity.mean)

    @property
    def premium(self) -> float:
        """c, the premium income per unit time."""
        if self.premium_rate is not None:
            return float(self.premium_rate)
        assert self.loading is not None
        return (1.0 + self.loading) * self.claim_rate * self.mean_claim

    @property
    def rho(self) -> float:
        """lambda E[claim] / c; psi(0) = rho for the infinite horizon."""
        return self.claim_rate * self.mean_claim / self.premium

    @property
    def profitable(self) -> bool:
        """The net profit condition c > lambda E[claim]."""
        return self.premium > self.claim_rate * self.mean_claim
