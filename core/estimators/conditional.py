"""Conditional Monte Carlo (Asmussen-Kroese) for sums with heavy-tailed claims.

P(S > x) = sum over claims c of P(S > x, c is the largest conditioned claim). Given everything
but claim c, that event has probability Fbar_c(max(M_-c, x - S_-c)). With random counts the
sum over claims becomes E[N_j] times the same quantity with line j's count replaced by its
size-biased law minus one, so one sample needs one evaluation per threshold. The line that holds
the conditioned claim is drawn with probability E[N_j] / sum_k E[N_k] over the conditioned
lines (those whose paid claims have no atom, i.e. no per-claim limit). Samples in which no
conditioned line has a claim are covered exactly by the term P(N_H = 0) P(S_L > x).

The `conditional_is` variant adds importance sampling on top: the other claims' counts are
tilted and lognormal claims' underlying normals are shifted, with the shift and tilt adapted by
the cross-entropy method from a short pilot. The likelihood ratio is exact for what is drawn.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize_scalar

from core.errors import MethodError
from core.estimators.base import Group, work_per_sample
from core.portfolio import Portfolio
from core.sampling import PILOT, Draw, LineProposal, block_rng, draw_block
from core.severities import Capped, Lognormal

_CE_ROUNDS = 3
_CE_SAMPLES = 4096
# Share of samples drawn from the model itself (defensive mixture, Hesterberg 1995): it caps
# the likelihood ratio at 1 / DEFENSIVE, so a region the adapted proposal neglects (one claim
# filling the gap) cannot hide behind a small reported error.
DEFENSIVE = 0.1


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


def _start_shift(portfolio: Portfolio, cond: Conditioning, x: float) -> float:
    """Common normal shift at the dominating point of the conditioned integrand.

    Maximises log Fbar(x - E_delta[S_-]) - sum_k n_k delta^2 / 2 over delta: the mode of the
    integrand along the direction that raises every lognormal claim's normal equally.
    """
    lines = portfolio.lines
    logn = [k for k, ln in enumerate(lines) if isinstance(ln.paid_severity, Lognormal)]
    if not logn:
        return 0.0
    lead = cond.heavy[int(np.argmax(cond.pick))]
    sev_lead = lines[lead].paid_severity

    def others_mean(delta: float) -> tuple[float, float]:
        total, weight = 0.0, 0.0
        for k, ln in enumerate(lines):
            n = ln.paid_count.mean - (1.0 if k == lead else 0.0)
            n = max(n, 0.0)
            sev = ln.paid_severity
            if isinstance(sev, Lognormal):
                total += n * math.exp(sev.mu + sev.sigma * delta + 0.5 * sev.sigma**2)
                weight += n
            else:
                total += n * sev.mean
        return total, weight

    def objective(delta: float) -> float:
        total, weight = others_mean(delta)
        return -(float(sev_lead.logsf(max(x - total, 0.0))) - 0.5 * weight * delta * delta)

    res = minimize_scalar(objective, bounds=(0.0, 20.0), method="bounded")
    return float(res.x) if res.success else 0.0


def _cross_entropy_step(
    portfolio: Portfolio, draw: Draw, v: np.ndarray, props: list[LineProposal],
    heavy: list[int],
) -> list[LineProposal]:
    """One cross-entropy update: weighted maximum likelihood of shift and count tilt."""
    total = v.sum()
    if not np.isfinite(total) or total <= 0.0:
        return props
    w = v / total
    out = []
    for k, line in enumerate(portfolio.lines):
        prop = props[k]
        counts = draw.line_counts[k]
        shift = prop.normal_shift
        zsum = draw.line_normal_sums[k]
        mean_count = float(w @ counts)
        if zsum is not None and mean_count > 0:
            shift = float(w @ zsum) / mean_count
        tilt = prop.count_tilt
        law = line.paid_count
        if k in heavy and law.kind != "fixed" and mean_count > 0:
            tilt = float(law.tilt_for_mean(max(mean_count, 1e-9)))
            tilt = min(max(tilt, -5.0), 5.0)
        out.append(LineProposal(count_tilt=tilt, normal_shift=shift))
    return out


def adapt(
    portfolio: Portfolio, x: float, seed: int, group: int
) -> tuple[list[LineProposal], np.ndarray]:
    """Cross-entropy adaptation from the dominating point; returns proposals and the last
    pilot's contributions (for the automatic choice)."""
    cond = Conditioning(portfolio)
    start = _start_shift(portfolio, cond, x)
    props = [
        LineProposal(normal_shift=start if isinstance(ln.paid_severity, Lognormal) else 0.0)
        for ln in portfolio.lines
    ]
    xs = np.array([x])
    v = np.zeros(0)
    for r in range(_CE_ROUNDS):
        rng = block_rng(seed, PILOT, group, r)
        j = cond.choose(_CE_SAMPLES, rng)
        draw = mixture_draw(cond, props, _CE_SAMPLES, rng, j)
        v = cond.values(draw, j, xs)[:, 0]
        if r < _CE_ROUNDS - 1:
            props = _cross_entropy_step(portfolio, draw, v, props, cond.heavy)
    return props, v


def plan_is(portfolio: Portfolio, thresholds: np.ndarray, seed: int) -> list[Group]:
    """Asmussen-Kroese with adapted importance sampling: one sample set per threshold."""
    cond = Conditioning(portfolio)
    groups = []
    for i, x in enumerate(np.asarray(thresholds, dtype=float)):
        props, _ = adapt(portfolio, float(x), seed, i)
        groups.append(_is_group(cond, props, i, float(x)))
    return groups


def _is_group(cond: Conditioning, props: list[LineProposal], i: int, x: float) -> Group:
    portfolio = cond.portfolio
    xs = np.array([x])

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        j = cond.choose(m, rng)
        return cond.values(mixture_draw(cond, props, m, rng, j), j, xs)

    shifts = ", ".join(
        f"line {k}: shift {p.normal_shift:.3g}, count tilt {p.count_tilt:.3g}"
        for k, p in enumerate(props)
    )
    work = work_per_sample(portfolio.expected_claims, 1)
    return Group((i,), values, work, f"Asmussen-Kroese with cross-entropy IS ({shifts})")


def _adapted_log_lr(
    portfolio: Portfolio, props: list[LineProposal], draw: Draw, cond_line: np.ndarray
) -> np.ndarray:
    """log f/g_adapted at every sample, from its sufficient statistics (normal sums, counts)."""
    out = np.zeros(draw.total.size)
    for k, (line, prop) in enumerate(zip(portfolio.lines, props, strict=True)):
        n = draw.line_counts[k]
        d, s = prop.normal_shift, prop.count_tilt
        if d != 0.0:
            zsum = draw.line_normal_sums[k]
            assert zsum is not None
            out += -d * zsum + 0.5 * d * d * n
        if s != 0.0:
            law = line.paid_count
            sb = cond_line == k
            log_m = np.where(sb, float(law.size_biased_minus_one().log_mgf(s)) if sb.any()
                             else 0.0, float(law.log_mgf(s)))
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
        cat(a.line_normal_sums, b.line_normal_sums),
    )


def mixture_draw(
    cond: Conditioning, props: list[LineProposal], m: int, rng: np.random.Generator,
    cond_line: np.ndarray,
) -> Draw:
    """Draw m samples from DEFENSIVE * model + (1 - DEFENSIVE) * adapted proposal and weight
    each by the mixture's exact likelihood ratio 1 / (a + (1 - a) g/f)."""
    portfolio = cond.portfolio
    m0 = int(rng.binomial(m, DEFENSIVE))
    nominal = draw_block(portfolio, m0, rng, size_biased=cond_line[:m0])
    adapted = draw_block(portfolio, m - m0, rng, proposals=props, size_biased=cond_line[m0:])
    draw = _concat(nominal, adapted)
    log_fg = _adapted_log_lr(portfolio, props, draw, cond_line)
    draw.log_lr = -np.logaddexp(math.log(DEFENSIVE), math.log1p(-DEFENSIVE) - log_fg)
    for k in cond.light:
        draw.line_log_lr[k] = np.zeros(m)
    return draw
