"""Block plan, seeds and the vectorised portfolio sampler shared by every estimator.

Randomness is tied to fixed-size blocks of samples, not to chunks or workers: block b of stream
(purpose, group) always draws from SeedSequence(seed, spawn_key=(purpose, group, b)). The block
size depends on the model only, so the same seed and request give the same answer however the
work is split.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np

from core.counts import ClaimCount
from core.portfolio import Portfolio
from core.severities import Lognormal, Severity

# Claims drawn per block are kept near this many floats so memory stays bounded.
_CLAIMS_PER_BLOCK = 1 << 20
_MIN_BLOCK, _MAX_BLOCK = 64, 8192

MAIN, PILOT = 0, 1


def block_size(portfolio: Portfolio) -> int:
    """Samples per block: as many as keep about 1M claims in memory, a power of two."""
    per_sample = max(1.0, portfolio.expected_claims)
    size = _CLAIMS_PER_BLOCK / per_sample
    size = 2 ** int(math.floor(math.log2(max(size, 1.0))))
    return int(min(_MAX_BLOCK, max(_MIN_BLOCK, size)))


def block_rng(seed: int, purpose: int, group: int, block: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(purpose, group, block)))


def blocks(total: int, size: int, start: int = 0) -> Iterator[tuple[int, int]]:
    """(block index, samples in block) for `total` samples from block `start` on."""
    index, left = start, total
    while left > 0:
        m = min(size, left)
        yield index, m
        index, left = index + 1, left - m


@dataclass(frozen=True)
class LineProposal:
    """How one line is drawn under importance sampling (zeros: the model itself).

    count_tilt: s, counts drawn with P(N=k) proportional to p_k e^{s k}.
    normal_shift: delta, a lognormal claim's underlying normal drawn with mean shifted by delta.
    claim_tilt: theta, claims drawn from the exponentially tilted law e^{theta y} f(y) / M(theta).
    """

    count_tilt: float = 0.0
    normal_shift: float = 0.0
    claim_tilt: float = 0.0


@dataclass
class Draw:
    """Per-sample results of one block: all arrays have one entry per sample."""

    total: np.ndarray  # S, the aggregate loss
    log_lr: np.ndarray  # log likelihood ratio of the whole sample (0 without IS)
    line_sums: list[np.ndarray]
    line_max: list[np.ndarray]  # -inf where the line had no claim
    line_log_lr: list[np.ndarray]
    line_counts: list[np.ndarray]
    line_normal_sums: list[np.ndarray | None] = field(default_factory=list)


def segment_sum(values: np.ndarray, counts: np.ndarray) -> np.ndarray:
    seg = np.repeat(np.arange(counts.size), counts)
    return np.bincount(seg, weights=values, minlength=counts.size)


def segment_max(values: np.ndarray, counts: np.ndarray) -> np.ndarray:
    out = np.full(counts.size, -np.inf)
    nonempty = counts > 0
    if values.size:
        starts = np.concatenate(([0], np.cumsum(counts)[:-1]))[nonempty]
        out[nonempty] = np.maximum.reduceat(values, starts)
    return out


def draw_counts(
    law: ClaimCount, sb_law: ClaimCount | None, sb_mask: np.ndarray | None, s: float,
    m: int, rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """Counts for m samples; samples in sb_mask use sb_law. Returns (counts, log LR)."""
    counts = np.empty(m, dtype=np.int64)
    log_lr = np.zeros(m)
    parts = [(law, np.ones(m, bool) if sb_mask is None else ~sb_mask)]
    if sb_mask is not None and sb_law is not None:
        parts.append((sb_law, sb_mask))
    for base, mask in parts:
        k = int(mask.sum())
        if k == 0:
            continue
        if s == 0.0:
            counts[mask] = base.sample(k, rng)
        else:
            drawn = base.tilted(s).sample(k, rng)
            counts[mask] = drawn
            log_lr[mask] = -s * drawn + float(base.log_mgf(s))
    return counts, log_lr


def draw_claims(
    sev: Severity, prop: LineProposal, size: int, rng: np.random.Generator,
    stepwise: StepwiseTilt | None,
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """(claims, per-claim log LR or None, underlying normals or None)."""
    if prop.normal_shift != 0.0 and isinstance(sev, Lognormal):
        z = rng.standard_normal(size) + prop.normal_shift
        d = prop.normal_shift
        return np.exp(sev.mu + sev.sigma * z), -d * z + 0.5 * d * d, z
    if prop.claim_tilt != 0.0:
        if stepwise is not None:
            y, llr = stepwise.sample(size, rng)
            return y, llr, None
        y = sev.sample_tilted(prop.claim_tilt, size, rng)
        return y, -prop.claim_tilt * y + float(sev.cumulant(prop.claim_tilt)), None
    if isinstance(sev, Lognormal):
        z = rng.standard_normal(size)
        return np.exp(sev.mu + sev.sigma * z), None, z
    return sev.sample(size, rng), None, None


def draw_block(
    portfolio: Portfolio, m: int, rng: np.random.Generator,
    proposals: list[LineProposal] | None = None,
    size_biased: np.ndarray | None = None,
    stepwise: list[StepwiseTilt | None] | None = None,
) -> Draw:
    """Draw m samples of the portfolio.

    size_biased: optional int array (one per sample) naming the line whose count is replaced by
    N* - 1 (size-biased minus one), as the conditional estimators need; -1 for none.
    """
    lines = portfolio.lines
    proposals = proposals or [LineProposal()] * len(lines)
    stepwise = stepwise or [None] * len(lines)
    total = np.zeros(m)
    log_lr = np.zeros(m)
    out = Draw(total, log_lr, [], [], [], [], [])
    for k, line in enumerate(lines):
        prop = proposals[k]
        sb_mask = None if size_biased is None else size_biased == k
        law = line.paid_count
        sb_law = law.size_biased_minus_one() if sb_mask is not None and sb_mask.any() else None
        counts, llr = draw_counts(law, sb_law, sb_mask, prop.count_tilt, m, rng)
        claims, claim_llr, normals = draw_claims(
            line.paid_severity, prop, int(counts.sum()), rng, stepwise[k]
        )
        sums = segment_sum(claims, counts)
        if claim_llr is not None:
            llr = llr + segment_sum(claim_llr, counts)
        out.line_sums.append(sums)
        out.line_max.append(segment_max(claims, counts))
        out.line_log_lr.append(llr)
        out.line_counts.append(counts)
        out.line_normal_sums.append(None if normals is None else segment_sum(normals, counts))
        total += sums
        log_lr += llr
    return out


class StepwiseTilt:
    """An exact-likelihood stand-in for an exponential tilt with no closed-form sampler.

    The support is cut into cells; a cell is picked with probability proportional to
    P(cell) e^{theta m} (m the cell's reference point), and the claim is then drawn from the
    severity restricted to that cell. The likelihood ratio f/g = W e^{-theta m} is exact for
    this law, whatever the cell layout; the finer the cells, the closer it is to the true tilt.
    """

    def __init__(self, sev: Severity, theta: float, *, cells: int = 1024) -> None:
        self.sev, self.theta = sev, theta
        lo = max(float(sev.support_min), float(sev.ppf(1e-12)))
        hi = self._upper(sev, theta, lo)
        edges = np.linspace(lo, hi, cells + 1)
        sf = np.asarray(sev.sf(edges), dtype=float)
        probs = np.append(-np.diff(sf), sf[-1])  # last cell: [hi, inf) or the atom at a cap
        probs[0] += 1.0 - sf[0]
        ref = np.append(0.5 * (edges[:-1] + edges[1:]), hi)
        with np.errstate(divide="ignore"):
            logw = np.log(probs) + theta * ref
        shift = logw.max()
        w = np.exp(logw - shift)
        self.log_w = float(np.log(w.sum()) + shift)  # log W, the stepwise cumulant
        self.pick = np.cumsum(w) / w.sum()
        self.edges_sf = np.append(sf, 0.0)
        self.edges_sf[0] = 1.0
        self.ref = ref

    @staticmethod
    def _upper(sev: Severity, theta: float, lo: float) -> float:
        """A point beyond which the tilted law has negligible mass (or the cap)."""
        cap = getattr(sev, "cap", None)
        if cap is not None:
            return float(cap)
        hi = max(float(sev.isf(1e-3)), lo + 1.0)
        # e^{theta y} sf(y) bounds the tilted tail beyond y; stop 40 e-folds below its peak.
        peak = -math.inf
        for _ in range(200):
            level = theta * hi + float(sev.logsf(hi))
            peak = max(peak, level)
            if level < peak - 40.0:
                return hi
            hi *= 1.25
        return hi

    def sample(self, size: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        cell = np.minimum(np.searchsorted(self.pick, rng.random(size), side="right"),
                          self.pick.size - 1)
        top, bottom = self.edges_sf[cell], self.edges_sf[cell + 1]
        u = bottom + (top - bottom) * rng.random(size)
        y = np.asarray(self.sev.isf(np.clip(u, 1e-300, 1.0)), dtype=float)
        cap = getattr(self.sev, "cap", None)
        if cap is not None:
            y = np.where(cell == self.pick.size - 1, cap, np.minimum(y, cap))
        return y, self.log_w - self.theta * self.ref[cell]
