"""Surplus paths under a change of measure, run claim by claim until they pass every capital.

Ruin can only happen at a claim instant, so a path is the random walk S_n = sum_{i<=n} (X_i -
c A_i) of the claim surplus at claim instants, with the clock t_n = sum A_i. Paths of a block
are advanced together, `steps` claims at a time for every path still running (numpy across
paths, cumulative sums along the claims). For each capital u the first n with S_n > u is found
from the running maximum: the number of capitals below it is non-decreasing along a path, so
one sorted search over the whole chunk places every first passage. A path stops once it has
passed the largest capital or its clock has passed the horizon.

The contribution of capital u is dP/dQ at its first passage tau, if tau <= T, else 0. It is
returned multiplied by e^{a u} (`a` the tilt), which for Siegmund's algorithm keeps it in (0, 1]
however far out u is; the caller multiplies back in log space.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from core.errors import LimitError
from core.ruin.measure import ClaimTilt
from core.ruin.process import SurplusProcess
from core.ruin.runner import OutOfTime

PATHS_PER_BLOCK = 1024
_MAX_STEPS = 1 << 9  # claims drawn per path per chunk, at most
# per path: beyond this a block of paths draws over 2e8 claims and runs for a minute or more
_MAX_EXPECTED_CLAIMS = 200_000


@dataclass(frozen=True)
class PathPlan:
    """What a block of paths needs: the process, the tilt, sorted capitals and the horizon."""

    process: SurplusProcess
    tilt: ClaimTilt
    capitals: np.ndarray  # sorted ascending
    horizon: float  # math.inf for the infinite horizon
    steps: int
    work: float  # expected claims per path
    stop_at: float | None = None  # monotonic deadline of a capital search (OutOfTime past it)

    @classmethod
    def build(
        cls, process: SurplusProcess, tilt: ClaimTilt, capitals: np.ndarray, horizon: float,
        *, stop_at: float | None = None,
    ) -> PathPlan:
        u = np.sort(np.asarray(capitals, dtype=float))
        expected = expected_claims(process, tilt, float(u[-1]), horizon)
        if expected > _MAX_EXPECTED_CLAIMS:
            raise LimitError(
                "capital",
                f"a path needs about {expected:.3g} claims to pass capital {u[-1]:g} under this "
                f"change of measure (limit {_MAX_EXPECTED_CLAIMS:g}); ask for a smaller capital "
                "or a shorter horizon",
            )
        steps = int(min(_MAX_STEPS, max(8, 2 ** math.ceil(math.log2(max(expected / 4, 1.0))))))
        return cls(process, tilt, u, horizon, steps, expected, stop_at)

    @property
    def arrival_rate(self) -> float:
        return self.process.claim_rate * math.exp(self.tilt.log_w)


def expected_claims(process: SurplusProcess, tilt: ClaimTilt, top: float, horizon: float) -> float:
    """About how many claims a path draws: to pass `top` at the tilted drift, or up to T."""
    rate = process.claim_rate * math.exp(tilt.log_w)
    drift = tilt.mean - process.premium / rate  # mean increment of S per claim under the tilt
    by_time = rate * horizon if math.isfinite(horizon) else math.inf
    by_drift = (top + tilt.mean) / drift + 1.0 if drift > 0 else math.inf
    return min(by_time, by_drift)


def passage_values(plan: PathPlan, m: int, rng: np.random.Generator) -> np.ndarray:
    """(m, K) scaled contributions e^{a u_j} dP/dQ 1{tau_j <= T}, columns in sorted order."""
    u, k = plan.capitals, plan.steps
    n_cap = u.size
    c, rate = plan.process.premium, plan.arrival_rate
    drift_lr = plan.process.claim_rate * math.expm1(plan.tilt.log_w)  # lambda (W - 1)
    a, log_w, horizon = plan.tilt.a, plan.tilt.log_w, plan.horizon
    surplus, log_lr, clock = np.zeros(m), np.zeros(m), np.zeros(m)
    passed = np.zeros(m, dtype=np.int64)  # capitals already passed
    out = np.zeros((m, n_cap))
    active = np.arange(m)
    while active.size:
        if plan.stop_at is not None and time.monotonic() > plan.stop_at:
            raise OutOfTime
        n = active.size
        claims, log_fg = plan.tilt.sample(n * k, rng)
        gaps = rng.standard_exponential((n, k)) / rate
        s = surplus[active, None] + np.cumsum(claims.reshape(n, k) - c * gaps, axis=1)
        lr = log_lr[active, None] + np.cumsum(log_fg.reshape(n, k) - log_w + drift_lr * gaps,
                                              axis=1)
        t = clock[active, None] + np.cumsum(gaps, axis=1)
        # capitals below the running maximum, never fewer than were passed before this chunk
        below = np.searchsorted(u, np.maximum.accumulate(s, axis=1), side="left")
        count = np.maximum(below, passed[active, None])
        _record(out, active, count, passed[active], t, lr, u, a, horizon)
        surplus[active], log_lr[active], clock[active] = s[:, -1], lr[:, -1], t[:, -1]
        passed[active] = count[:, -1]
        active = active[(passed[active] < n_cap) & (clock[active] <= horizon)]
    return out


def _record(
    out: np.ndarray, active: np.ndarray, count: np.ndarray, before: np.ndarray, t: np.ndarray,
    lr: np.ndarray, u: np.ndarray, a: float, horizon: float,
) -> None:
    """Write the contribution of every capital first passed in this chunk."""
    n, k = count.shape
    n_cap = u.size
    new = count[:, -1] - before
    total = int(new.sum())
    if total == 0:
        return
    rows = np.repeat(np.arange(n), new)
    first = np.cumsum(new) - new
    cap = before[rows] + (np.arange(total) - first[rows])
    # row r's keys r (K+1) + count[r, s] rise along the flattened array, so one search finds,
    # for every (row, capital j), the first step whose count exceeds j: the first passage
    keys = (np.arange(n)[:, None] * (n_cap + 1) + count).ravel()
    step = np.searchsorted(keys, rows * (n_cap + 1) + cap, side="right") - rows * k
    tau = t[rows, step]
    hit = tau <= horizon
    log_v = lr[rows, step] + a * u[cap]
    out[active[rows[hit]], cap[hit]] = np.exp(log_v[hit])
