"""Conditional Monte Carlo (Asmussen-Kroese) for sums with heavy-tailed claims.

P(S > x) = sum over claims c of P(S > x, c is the largest conditioned claim). Given everything
but claim c, that event has probability Fbar_c(max(M_-c, x - S_-c)). With random counts the
sum over claims becomes E[N_j] times the same quantity with line j's count replaced by its
size-biased law minus one, so one sample needs one evaluation per threshold. The line that holds
the conditioned claim is drawn with probability E[N_j] / sum_k E[N_k] over the conditioned
lines: the heavy-tailed lines without a per-claim limit (an atom at the limit would break the
"which claim is the largest" partition), or every line without a limit when none is heavy.
Samples in which no conditioned line has a claim are covered exactly by the term
P(N_H = 0) P(S_L > x).

The `conditional_is` variant adds importance sampling on top: the other claims of the
conditioned lines are drawn from a capped exponential tilt e^{theta min(y, c)} and their counts
from the matching tilted law, theta adapted by moment matching (cross-entropy) from a short
pilot, in a defensive mixture with the model itself. The likelihood ratio is exact for what is
drawn.
"""

from __future__ import annotations

import math

import numpy as np

from core.errors import MethodError
from core.estimators.base import Group, work_per_sample
from core.estimators.mixture import TiltFamily
from core.portfolio import Portfolio
from core.sampling import Draw, TiltGrid, draw_block
from core.severities import Capped
from core.streams import Purpose, Stream

# Moment-matching updates of theta from its start, each on its own pilot block.
_CE_ROUNDS = 2
_CE_SAMPLES = 4096
# Share of samples drawn from the model itself (defensive mixture, Hesterberg 1995): it caps
# the likelihood ratio at 1 / DEFENSIVE, so a region the adapted proposal neglects (one claim
# filling the gap) cannot hide behind a small reported error.
DEFENSIVE = 0.1
# The capped tilt acts up to this multiple of the threshold's share per expected claim.
_CAP_FACTOR = 3.0


class Conditioning:
    """The conditioned lines of a portfolio and the constants the estimator needs."""

    def __init__(self, portfolio: Portfolio) -> None:
        self.portfolio = portfolio
        lines = portfolio.lines
        atomless = [k for k, ln in enumerate(lines) if not isinstance(ln.paid_severity, Capped)]
        # Conditioning pays on heavy-tailed claims; on a light line among heavy ones it only
        # adds variance (its claim rarely decides the event), so such lines are carried along.
        heavy = [k for k in atomless if lines[k].paid_severity.tail == "heavy"]
        self.heavy = heavy or atomless
        if not self.heavy:
            raise MethodError(
                "method",
                "conditional Monte Carlo needs at least one line without a per-claim limit; "
                "use tilted or auto",
            )
        self.light = [k for k in range(len(lines)) if k not in self.heavy]
        means = np.array([lines[k].paid_count.mean for k in self.heavy])
        self.rate = float(means.sum())
        self.pick = means / self.rate
        p0 = math.prod(float(lines[k].paid_count.pmf(0)) for k in self.heavy)
        self.p0 = p0

    def choose(self, m: int, rng: np.random.Generator) -> np.ndarray:
        if len(self.heavy) == 1:
            return np.full(m, self.heavy[0])
        return np.asarray(self.heavy)[rng.choice(len(self.heavy), size=m, p=self.pick)]

    def values(self, draw: Draw, cond: np.ndarray, x: np.ndarray) -> np.ndarray:
        """Per-sample contributions, shape (m, len(x))."""
        lines = self.portfolio.lines
        m = draw.total.size
        top = np.full(m, -np.inf)
        for k in self.heavy:
            top = np.maximum(top, draw.line_max[k])
        t = np.maximum(top[:, None], x[None, :] - draw.total[:, None])
        logsf = np.empty_like(t)
        for k in self.heavy:
            mask = cond == k
            if mask.any():
                logsf[mask] = lines[k].paid_severity.logsf(t[mask])
        log_v = math.log(self.rate) + logsf + draw.log_lr[:, None]
        v = np.exp(log_v)
        if self.p0 > 0.0:
            light_sum = np.zeros(m)
            light_llr = np.zeros(m)
            for k in self.light:
                light_sum += draw.line_sums[k]
                light_llr += draw.line_log_lr[k]
            hit = light_sum[:, None] > x[None, :]
            v += self.p0 * hit * np.exp(light_llr)[:, None]
        return v


def plan_plain(portfolio: Portfolio, thresholds: np.ndarray) -> list[Group]:
    """Asmussen-Kroese without importance sampling: one sample set for every threshold."""
    cond = Conditioning(portfolio)
    x = np.asarray(thresholds, dtype=float)

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(draw_block(portfolio, m, rng, size_biased=j), j, x)

    work = work_per_sample(portfolio.expected_claims, x.size)
    return [Group(tuple(range(x.size)), values, work, "Asmussen-Kroese, no importance sampling")]


def capped_family(cond: Conditioning, x: float) -> TiltFamily:
    """Capped exponential tilts e^{theta min(y, c_k)} of every conditioned line's claims (the
    conditioned, largest claim itself is never tilted). The cap c_k keeps each claim's own
    heavy tail beyond it, so one big claim is still covered by the conditioning."""
    lines = cond.portfolio.lines
    claims = max(1.0, cond.portfolio.expected_claims)
    grids: dict[int, TiltGrid | None] = {}
    for k in cond.heavy:
        sev = lines[k].paid_severity
        cap = max(_CAP_FACTOR * x / claims, float(sev.isf(1e-3)))
        grids[k] = TiltGrid(sev, min(cap, max(x, float(sev.isf(0.5)))))
    return TiltFamily(cond.portfolio, grids, lead=cond.heavy[int(np.argmax(cond.pick))])


def adapt(portfolio: Portfolio, x: float, seed: int, stream: Stream) -> tuple[TiltFamily, float]:
    """Moment matching (the cross-entropy update of a natural exponential family) from the
    start E_theta[S_-] = x, round r on block r of `stream`; returns the family and theta."""
    cond = Conditioning(portfolio)
    family = capped_family(cond, x)
    theta = family.theta_for(x)
    xs = np.array([x])
    for r in range(_CE_ROUNDS):
        rng = stream.rng(seed, r)
        j = cond.choose(_CE_SAMPLES, rng)
        draw = family.draw([theta], _CE_SAMPLES, rng, j, defensive=DEFENSIVE)
        v = cond.values(draw, j, xs)[:, 0]
        total = v.sum()
        if total > 0 and np.isfinite(total):
            refs = np.zeros(v.size)
            for k in family.grids:
                score = draw.line_scores[k]
                assert score is not None
                refs += score
            theta = family.theta_for(float(v @ refs / total))
    return family, theta


def plan_is(portfolio: Portfolio, thresholds: np.ndarray, seed: int) -> list[Group]:
    """Asmussen-Kroese with adapted importance sampling: one sample set per threshold."""
    cond = Conditioning(portfolio)
    groups = []
    for i, x in enumerate(np.asarray(thresholds, dtype=float)):
        stream = Stream(Purpose.ADAPT, "conditional_is", (i,))
        family, theta = adapt(portfolio, float(x), seed, stream)
        groups.append(_is_group(cond, family, theta, i, float(x)))
    return groups


def _is_group(cond: Conditioning, family: TiltFamily, theta: float, i: int, x: float) -> Group:
    xs = np.array([x])

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(family.draw([theta], m, rng, j, defensive=DEFENSIVE), j, xs)

    caps = ", ".join(f"line {k} cap {float(g.ref[-1]):.4g}" for k, g in family.grids.items()
                     if g is not None)
    work = work_per_sample(cond.portfolio.expected_claims, 1)
    return Group((i,), values, work,
                 f"Asmussen-Kroese with capped exponential tilt theta = {theta:.4g} ({caps})")
