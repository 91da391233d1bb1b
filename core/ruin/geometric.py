"""Infinite-horizon ruin through the Pollaczek-Khinchine formula, on the exceedance engine.

psi(u) = P(I_1 + ... + I_N > u) with N geometric, P(N = n) = (1 - rho) rho^n, rho = lambda mu / c,
and I_i independent with the integrated-tail law of the claims (core.integrated_tail). The
geometric law is the negative binomial with r = 1: mean rho / (1 - rho), dispersion 1 / (1 - rho).
The sum is a one-line portfolio, so core.exceedance estimates it with its own automatic choice,
Asmussen-Kroese conditioning, importance sampling and diagnostics.
"""

from __future__ import annotations

import math

import numpy as np

from core.counts import NegativeBinomial
from core.estimators import registry
from core.estimators.registry import AUTO
from core.exceedance import exceedance
from core.integrated_tail import IntegratedTail
from core.portfolio import Line, Portfolio
from core.ruin import report
from core.ruin.approximations import approximation
from core.ruin.capital import Bracket
from core.ruin.process import SurplusProcess
from core.ruin.runner import Batch, Context

# The capital search's estimator when the requested one draws a sample set per capital.
GRID_METHOD = "conditional"


def geometric_sum(process: SurplusProcess) -> Portfolio:
    rho = process.rho
    count = NegativeBinomial(mean=rho / (1.0 - rho), dispersion=1.0 / (1.0 - rho))
    return Portfolio(lines=[Line(count=count, severity=IntegratedTail(base=process.net_severity))])


class GeometricRegime:
    def __init__(self, ctx: Context, method: str) -> None:
        self.ctx, self.method = ctx, method
        self.portfolio = geometric_sum(ctx.process)
        self.integrated = self.portfolio.lines[0].severity
        self.name = method
        self.engine_reason = ""
        self.grid_method: str | None = None

    @property
    def reason(self) -> str:
        rho = self.ctx.process.rho
        text = (f"Pollaczek-Khinchine: psi(u) = P(geometric sum of integrated-tail claims > u), "
                f"rho = {rho:.6g}, estimated by the exceedance engine ({self.engine_reason})")
        if self.grid_method is not None and self.grid_method != self.name:
            text += (f"; the capital search used {self.grid_method} (one sample set for every "
                     "grid capital)")
        return text

    def estimate(self, capitals: np.ndarray, stream: int) -> Batch:
        ctx = self.ctx
        method = self.method
        shared = method != AUTO and registry.get(method).one_sample_set
        if stream > 0 and not shared:
            # the capital search needs one sample set for all grid capitals: plain conditioning
            # has that; conditional_is (and so auto, often) draws a set per threshold
            method = GRID_METHOD
            self.grid_method = method
        res = exceedance(self.portfolio, capitals.tolist(), method=method,
                         precision=ctx.remaining(), seed=ctx.seed)
        if stream == 0:
            self.name, self.engine_reason = res.method, res.method_reason
        out = [report.from_exceedance(e, approximation(ctx, e.threshold)) for e in res.estimates]
        return out, [res.stopped_by]

    def bracket(self, target: float) -> Bracket:
        """From rho sf_I(u) <= psi(u) (one integrated-tail variable already above u) up to a few
        times the asymptotic's capital, or to Lundberg's bound exp(-gamma u) where it holds."""
        rho, sev = self.ctx.process.rho, self.integrated
        lo = float(sev.isf(target / rho))
        gamma = self.ctx.gamma
        if gamma is not None:
            return Bracket(lo=lo, hi=max(-math.log(target) / gamma, lo), log_u=False, sure_hi=True)
        guess = float(sev.isf(min(1.0, target * (1.0 - rho) / rho)))
        scale = self.ctx.process.mean_claim
        return Bracket(lo=lo, hi=4.0 * max(guess, lo) + scale, log_u=True, sure_hi=False,
                       scale=scale)
