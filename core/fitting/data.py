"""Loss data as the fitter sees it: claim amounts above a reporting threshold, some of them
capped at a policy limit (right-censored), and the checks that turn bad data into errors
naming the field and the index.

A claim i with a limit c_i is censored when its amount equals the limit: the loss was at least
c_i. An amount below its limit is an exact observation; an amount above it contradicts the
limit and is refused. Amounts are compared with a relative tolerance of 1e-9 so that a limit
that went through a spreadsheet still matches.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from core.errors import ParameterError

Floats = NDArray[np.float64]
_MATCH = 1e-9


@dataclass(frozen=True, kw_only=True)
class ClaimData:
    """Validated claims. ``x`` holds the amounts, ``censored`` marks the capped ones (x is then
    the limit), ``threshold`` the reporting threshold (None: every claim is reported), and
    ``limits`` each claim's limit (inf where none), which the bootstrap reuses."""

    x: Floats
    censored: NDArray[np.bool_]
    threshold: float | None
    limits: Floats

    @property
    def n(self) -> int:
        return int(self.x.size)

    @property
    def exact(self) -> Floats:
        return self.x[~self.censored]

    @property
    def any_censored(self) -> bool:
        return bool(self.censored.any())


def _finite_list(name: str, values: Sequence[float | None], allow_none: bool) -> Floats:
    out = np.empty(len(values))
    for i, v in enumerate(values):
        if v is None and allow_none:
            out[i] = math.inf
            continue
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise ParameterError(f"{name}[{i}]", f"must be a finite number, got {v!r}")
        out[i] = float(v)
    return out


def claim_data(
    claims: Sequence[float], *, reporting_threshold: float | None = None,
    censored_at: Sequence[float | None] | None = None,
) -> ClaimData:
    """Check the claims and build the data object; every error names the field and index."""
    if len(claims) == 0:
        raise ParameterError("claims", "must hold at least one claim")
    x = _finite_list("claims", claims, allow_none=False)
    d = reporting_threshold
    if d is not None:
        if isinstance(d, bool) or not math.isfinite(d) or d < 0:
            raise ParameterError("reporting_threshold", f"must be a finite number >= 0, got {d}")
        below = np.flatnonzero(x < d)
        if below.size:
            i = int(below[0])
            raise ParameterError(
                f"claims[{i}]", f"{x[i]:g} is below the stated reporting_threshold {d:g} "
                f"({below.size} claims are); claims under the threshold are not reported")
    limits = np.full(x.size, math.inf)
    if censored_at is not None:
        if len(censored_at) != x.size:
            raise ParameterError("censored_at", f"must have one entry per claim ({x.size}), "
                                 f"got {len(censored_at)}")
        limits = _finite_list("censored_at", censored_at, allow_none=True)
        bad = np.flatnonzero(limits <= 0)
        if bad.size:
            i = int(bad[0])
            raise ParameterError(f"censored_at[{i}]", f"a limit must be > 0, got {limits[i]:g}")
        if d is not None:
            low = np.flatnonzero(limits <= d)
            if low.size:
                i = int(low[0])
                raise ParameterError(f"censored_at[{i}]", f"limit {limits[i]:g} is at or below "
                                     f"the reporting_threshold {d:g}")
    capped = np.isfinite(limits)
    tol = _MATCH * np.where(capped, np.maximum(np.abs(limits), 1.0), 0.0)
    over = np.flatnonzero(capped & (x > limits + tol))
    if over.size:
        i = int(over[0])
        raise ParameterError(f"claims[{i}]", f"{x[i]:g} is above its limit censored_at[{i}] = "
                             f"{limits[i]:g}; a capped claim is reported at its limit")
    censored = capped & (x >= limits - tol)
    x = np.where(censored, limits, x)
    return ClaimData(x=x, censored=censored, threshold=d, limits=limits)


def check_for_family(data: ClaimData, family: str, min_claims: int, positive: bool,
                     where: str = "families") -> None:
    """Refuse data a family cannot be fitted to, naming the field at fault."""
    if data.n < min_claims:
        raise ParameterError("claims", f"has {data.n} claims; {family} needs at least "
                             f"{min_claims} ({where})")
    exact = data.exact
    if exact.size < 2:
        raise ParameterError("censored_at", f"leaves {exact.size} uncensored claims; {family} "
                             "needs at least 2 exact amounts")
    if positive:
        bad = np.flatnonzero(data.x <= 0)
        if bad.size:
            i = int(bad[0])
            raise ParameterError(f"claims[{i}]", f"{data.x[i]:g} is not > 0, but {family} "
                                 "claims are positive (fit normal for amounts of either sign)")
    if float(np.ptp(exact)) <= 1e-12 * max(float(np.abs(exact).max()), 1e-300):
        raise ParameterError("claims", f"all uncensored claims are equal ({exact[0]:g}): no "
                             "spread to fit a distribution to")
