"""Conditional Monte Carlo (Asmussen-Kroese) for sums with heavy-tailed claims.

P(S > x) = sum over claims c of P(S > x, c is the largest conditioned claim). Given everything
but claim c, that event has probability Fbar_c(max(M_-c, x - S_-c)). With random counts the
sum over claims becomes E[N_j] times the same quantity with line j's count replaced by its
size-biased law minus one, so one sample needs one evaluation per threshold. The line that holds
the conditioned claim is drawn with probability E[N_j] / sum_k E[N_k] over the conditioned
lines (those whose paid claims have no atom, i.e. no per-claim limit). Samples in which no
conditioned line has a claim are covered exactly by the term P(N_H = 0) P(S_L > x).

The `conditional_is` variant adds importance sampling on top: the other claims of the
conditioned lines are drawn from a capped exponential tilt e^{theta min(y, c)} and their counts
from the matching tilted law, theta adapted by moment matching (cross-entropy) from a short
pilot, in a defensive mixture with the model itself. The likelihood ratio is exact for what is
drawn.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy.optimize import brentq

from core.errors import MethodError
from core.estimators.base import Group, work_per_sample
from core.portfolio import Portfolio
from core.sampling import (
    PILOT,
    Draw,
    LineProposal,
    StepwiseTilt,
    TiltGrid,
    block_rng,
    draw_block,
)
from core.severities import Capped

_CE_ROUNDS = 3
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
        self.heavy = [k for k, ln in enumerate(lines) if not isinstance(ln.paid_severity, Capped)]
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


class CappedTilt:
    """The importance-sampling family on top of the conditioning: every conditioned line's
    claims tilted by e^{theta min(y, c_k)} (a stepwise capped tilt) and its random count tilted
    by the matching log W, one theta for the whole portfolio, as in exponential tilting of a
    compound sum. The cap c_k keeps each claim's own heavy tail beyond it, and the
    conditioned (largest) claim is never tilted, so one big claim is still covered exactly."""

    def __init__(self, cond: Conditioning, x: float) -> None:
        self.cond = cond
        lines = cond.portfolio.lines
        claims = max(1.0, cond.portfolio.expected_claims)
        self.lead = cond.heavy[int(np.argmax(cond.pick))]
        self.grids: dict[int, TiltGrid] = {}
        for k in cond.heavy:
            sev = lines[k].paid_severity
            cap = max(_CAP_FACTOR * x / claims, float(sev.isf(1e-3)))
            self.grids[k] = TiltGrid(sev, min(cap, max(x, float(sev.isf(0.5)))))

    def proposal(self, theta: float) -> tuple[list[LineProposal], list[StepwiseTilt | None]]:
        props: list[LineProposal] = []
        steps: list[StepwiseTilt | None] = []
        for k, line in enumerate(self.cond.portfolio.lines):
            grid = self.grids.get(k)
            if grid is None or theta == 0.0:
                props.append(LineProposal())
                steps.append(None)
                continue
            step = StepwiseTilt(grid, theta)
            tilt = 0.0 if line.paid_count.kind == "fixed" else step.log_w
            props.append(LineProposal(count_tilt=tilt, claim_tilt=theta))
            steps.append(step)
        return props, steps

    def scores(self) -> list[Callable[[np.ndarray], np.ndarray] | None]:
        return [None if k not in self.grids else self.grids[k].ref_of
                for k in range(len(self.cond.portfolio.lines))]

    def mean_ref(self, theta: float) -> float:
        """E_theta[sum of the reference points of the other conditioned claims]."""
        total = 0.0
        lines = self.cond.portfolio.lines
        for k, grid in self.grids.items():
            law = lines[k].paid_count
            n = law.mean
            if law.kind != "fixed" and theta != 0.0:
                n = law.tilted(StepwiseTilt(grid, theta).log_w).mean
            if k == self.lead:
                n = max(n - 1.0, 0.0)
            total += n * grid.tilted_mean_ref(theta)
        return total

    def theta_for(self, target: float) -> float:
        """theta >= 0 whose proposal puts E[sum of reference points] at target."""
        f = lambda t: self.mean_ref(t) - target  # noqa: E731
        if f(0.0) >= 0.0:
            return 0.0
        hi = 1.0 / max(min(float(g.ref[-1]) for g in self.grids.values()), 1e-300)
        for _ in range(60):
            try:
                if f(hi) > 0.0:
                    return float(brentq(f, 0.0, hi, xtol=1e-10 * hi))
            except (ValueError, OverflowError):
                break
            hi *= 2.0
        return 0.0

    def log_ratio(self, props: list[LineProposal], steps: list[StepwiseTilt | None],
                  draw: Draw, cond_line: np.ndarray) -> np.ndarray:
        """log f/g_adapted at every sample, from its reference-point sums and counts."""
        out = np.zeros(draw.total.size)
        for k, line in enumerate(self.cond.portfolio.lines):
            step = steps[k]
            if step is None:
                continue
            n = draw.line_counts[k]
            refs = draw.line_scores[k]
            assert refs is not None
            out += n * step.log_w - step.theta * refs
            s = props[k].count_tilt
            if s != 0.0:
                law = line.paid_count
                log_m = np.full(n.size, float(law.log_mgf(s)))
                sb = cond_line == k
                if sb.any():
                    log_m[sb] = float(law.size_biased_minus_one().log_mgf(s))
                out += -s * n + log_m
        return out


def _concat(a: Draw, b: Draw) -> Draw:
    def cat(x: list, y: list) -> list:
        return [None if p is None or q is None else np.concatenate([p, q])
                for p, q in zip(x, y, strict=True)]

    return Draw(
        np.concatenate([a.total, b.total]), np.concatenate([a.log_lr, b.log_lr]),
        cat(a.line_sums, b.line_sums), cat(a.line_max, b.line_max),
        cat(a.line_log_lr, b.line_log_lr), cat(a.line_counts, b.line_counts),
        cat(a.line_scores, b.line_scores),
    )


def mixture_draw(
    family: CappedTilt, theta: float, m: int, rng: np.random.Generator, cond_line: np.ndarray
) -> Draw:
    """Draw m samples from DEFENSIVE * model + (1 - DEFENSIVE) * adapted proposal and weight
    each by the mixture's exact likelihood ratio 1 / (a + (1 - a) g/f)."""
    cond = family.cond
    portfolio = cond.portfolio
    props, steps = family.proposal(theta)
    m0 = int(rng.binomial(m, DEFENSIVE)) if theta != 0.0 else m
    scores = family.scores()
    nominal = draw_block(portfolio, m0, rng, size_biased=cond_line[:m0], scores=scores)
    adapted = draw_block(portfolio, m - m0, rng, proposals=props, size_biased=cond_line[m0:],
                         stepwise=steps, scores=scores)
    draw = _concat(nominal, adapted)
    if theta != 0.0:
        log_fg = family.log_ratio(props, steps, draw, cond_line)
        draw.log_lr = -np.logaddexp(math.log(DEFENSIVE), math.log1p(-DEFENSIVE) - log_fg)
    else:
        draw.log_lr = np.zeros(m)
    for k in cond.light:
        draw.line_log_lr[k] = np.zeros(m)
    return draw


def adapt(
    portfolio: Portfolio, x: float, seed: int, group: int
) -> tuple[CappedTilt, float, np.ndarray]:
    """Moment matching (the cross-entropy update of a natural exponential family) from the
    start E_theta[S_-] = x; returns the family, theta and the last pilot's contributions."""
    cond = Conditioning(portfolio)
    family = CappedTilt(cond, x)
    theta = family.theta_for(x)
    xs = np.array([x])
    v = np.zeros(0)
    for r in range(_CE_ROUNDS):
        rng = block_rng(seed, PILOT, group, r)
        j = cond.choose(_CE_SAMPLES, rng)
        draw = mixture_draw(family, theta, _CE_SAMPLES, rng, j)
        v = cond.values(draw, j, xs)[:, 0]
        total = v.sum()
        if r < _CE_ROUNDS - 1 and total > 0 and np.isfinite(total):
            refs = sum(draw.line_scores[k] for k in family.grids)
            theta = family.theta_for(float(v @ refs / total))
    return family, theta, v


def plan_is(portfolio: Portfolio, thresholds: np.ndarray, seed: int) -> list[Group]:
    """Asmussen-Kroese with adapted importance sampling: one sample set per threshold."""
    groups = []
    for i, x in enumerate(np.asarray(thresholds, dtype=float)):
        family, theta, _ = adapt(portfolio, float(x), seed, i)
        groups.append(_is_group(family, theta, i, float(x)))
    return groups


def _is_group(family: CappedTilt, theta: float, i: int, x: float) -> Group:
    cond = family.cond
    xs = np.array([x])

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(mixture_draw(family, theta, m, rng, j), j, xs)

    caps = ", ".join(f"line {k} cap {float(g.ref[-1]):.4g}" for k, g in family.grids.items())
    work = work_per_sample(cond.portfolio.expected_claims, 1)
    return Group((i,), values, work,
                 f"Asmussen-Kroese with capped exponential tilt theta = {theta:.4g} ({caps})")
