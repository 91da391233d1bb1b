"""The classical approximation reported beside each ruin estimate.

- infinite horizon, an adjustment coefficient gamma: Cramer-Lundberg, psi(u) ~ C exp(-gamma u);
- infinite horizon, heavy tails: the subexponential asymptotic psi(u) ~ rho / (1 - rho) sf_I(u)
  (sf_I the integrated tail; Embrechts & Veraverbeke);
- finite horizon, heavy tails: one big jump while the surplus drifts at its mean,
  psi(u, T) ~ lambda int_0^T sf(u + (c - lambda mu) t) dt (from memory); it tends to the
  infinite-horizon asymptotic as T grows;
- otherwise none.
"""

from __future__ import annotations

import math

from scipy import integrate

from core.integrated_tail import IntegratedTail
from core.ruin.runner import Context


def approximation(ctx: Context, u: float) -> float | None:
    process = ctx.process
    sev = process.net_severity
    if math.isfinite(ctx.horizon):
        if sev.tail != "heavy":
            return None
        lam = process.claim_rate
        drift = process.premium - lam * process.mean_claim
        value = integrate.quad(lambda t: float(sev.sf(max(u + drift * t, 0.0))), 0.0,
                               ctx.horizon, limit=200, epsabs=0.0, epsrel=1e-10)[0]
        return lam * value
    if ctx.gamma is not None and ctx.constant is not None:
        return math.exp(math.log(ctx.constant) - ctx.gamma * u)
    if sev.tail != "heavy":
        return None
    rho = process.rho
    return math.exp(math.log(rho / (1.0 - rho)) + float(IntegratedTail(base=sev).logsf(u)))
