"""Log-likelihood of claim data under a severity, with left truncation at the reporting
threshold and right censoring at policy limits entering exactly.

For a threshold d, exact amounts x_i and censored limits c_j (the loss was at least c_j),

    log L = sum_i log f(x_i) + sum_j log S(c_j) - n log S(d)

(Klugman, Panjer and Willmot, "Loss Models", the truncated and censored likelihood). Every
term goes through the severity's log-space formulas, so a far-tail limit or threshold adds
its true value, not log 0.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from core.errors import TailgaugeError
from core.fitting.data import ClaimData, Floats
from core.severities import Severity


def _inside(severity: Severity, x: Floats) -> bool:
    return bool(x.size == 0 or (float(x.min()) > severity.support_min
                                and float(x.max()) < severity.support_max))


def log_likelihood(severity: Severity, data: ClaimData) -> float:
    """log L of ``data`` under ``severity``; -inf where a claim lies outside the support."""
    exact = data.x[~data.censored]
    capped = data.x[data.censored]
    if _inside(severity, exact) and _inside(severity, capped):
        # Every amount lies strictly inside the support, where the family's own log-space
        # formulas apply directly: this skips the public methods' edge handling, which
        # costs more than the formulas at the sizes a likelihood is evaluated at.
        total = float(np.sum(severity._logpdf(exact)))
        if capped.size:
            total += float(np.sum(severity._logsf(capped)))
    else:
        total = float(np.sum(severity.logpdf(exact)))
        if capped.size:
            total += float(np.sum(severity.logsf(capped)))
    if data.threshold is not None and data.threshold > severity.support_min:
        total -= data.n * float(severity.logsf(data.threshold))
    return total if math.isfinite(total) else -math.inf


def pointwise(severity: Severity, data: ClaimData) -> Floats:
    """Each claim's contribution to log L (the threshold's share spread evenly)."""
    out = np.where(data.censored, severity.logsf(data.x), severity.logpdf(data.x))
    if data.threshold is not None and data.threshold > severity.support_min:
        out = out - float(severity.logsf(data.threshold))
    return np.asarray(out, dtype=np.float64)


def objective(build: Callable[[Floats], Severity], data: ClaimData) -> Callable[[Floats], float]:
    """Negative log-likelihood of a free parameter vector; +inf outside the domain (the
    severity's own checks refuse it) or where the data fall outside the support."""

    def nll(z: Floats) -> float:
        if not np.all(np.isfinite(z)):
            return math.inf
        try:
            with np.errstate(all="ignore"):
                value = -log_likelihood(build(np.asarray(z, dtype=float)), data)
        except (TailgaugeError, ArithmeticError, ValueError):
            return math.inf
        return value if math.isfinite(value) else math.inf

    return nll
