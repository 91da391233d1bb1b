"""Block plan, seeds and the vectorised portfolio sampler shared by every estimator.

Randomness is tied to fixed-size blocks of samples, not to chunks or workers: block b of a
stream (core.streams) always draws from the same SeedSequence. The block size depends on the
model only, so the same seed and request give the same answer however the work is split.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from core.big_claim import BigClaim
from core.counts import ClaimCount
from core.errors import LimitError
from core.portfolio import Portfolio
from core.severities import Severity

# Claims drawn per block are kept near this many floats so memory stays bounded.
_CLAIMS_PER_BLOCK = 1 << 20
_MIN_BLOCK, _MAX_BLOCK = 64, 8192

# A guard against proposals (or models) that would need more memory than a block allows.
MAX_CLAIMS_PER_BLOCK = 1 << 26


def block_size(portfolio: Portfolio) -> int:
    """Samples per block: as many as keep about 1M claims in memory, a power of two."""
    per_sample = max(1.0, portfolio.expected_claims)
    size = _CLAIMS_PER_BLOCK / per_sample
    size = 2 ** math.floor(math.log2(max(size, 1.0)))
    return int(min(_MAX_BLOCK, max(_MIN_BLOCK, size)))


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
    claim_tilt: theta, claims drawn from the exponentially tilted law e^{theta y} f(y) / M(theta)
        (the closed form where the severity has one, else the line's StepwiseTilt).
    """

    count_tilt: float = 0.0
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
    # Per line, the sum over its claims of score(y) when a score function was given.
    line_scores: list[np.ndarray | None] = field(default_factory=list)
    # Per sample, the big-claim component's sum of r(y) over the lead line's claims
    # (core.big_claim), when one was given.
    big_ratio: np.ndarray | None = None


def _equal(counts: np.ndarray) -> int | None:
    """The common count when every sample has the same positive number of claims (a fixed
    count): segments are then the rows of a reshape, several times faster than a scatter."""
    if counts.size and counts[0] > 0 and counts.min() == counts.max():
        return int(counts[0])
    return None


def segment_sum(values: np.ndarray, counts: np.ndarray) -> np.ndarray:
    n = _equal(counts)
    if n is not None:
        return np.asarray(values.reshape(counts.size, n).sum(axis=1), dtype=float)
    seg = np.repeat(np.arange(counts.size), counts)
    return np.bincount(seg, weights=values, minlength=counts.size)


def segment_max(values: np.ndarray, counts: np.ndarray) -> np.ndarray:
    n = _equal(counts)
    if n is not None:
        return np.asarray(values.reshape(counts.size, n).max(axis=1), dtype=float)
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
) -> tuple[np.ndarray, np.ndarray | None]:
    """(claims, per-claim log LR or None when drawn from the model)."""
    if prop.claim_tilt == 0.0:
        return sev.sample(size, rng), None
    if stepwise is not None:
        return stepwise.sample(size, rng)
    y = sev.sample_tilted(prop.claim_tilt, size, rng)
    return y, -prop.claim_tilt * y + float(sev.cumulant(prop.claim_tilt))


def draw_block(
    portfolio: Portfolio, m: int, rng: np.random.Generator,
    proposals: list[LineProposal] | None = None,
    size_biased: np.ndarray | None = None,
    stepwise: list[StepwiseTilt | None] | None = None,
    scores: list[Callable[[np.ndarray], np.ndarray] | None] | None = None,
    big: BigClaim | None = None,
    big_mask: np.ndarray | None = None,
) -> Draw:
    """Draw m samples of the portfolio.

    size_biased: optional int array (one per sample) naming the line whose count is replaced by
    N* - 1 (size-biased minus one), as the conditional estimators need; -1 for none.
    scores: optional per-line function of the claims, summed per sample into line_scores
    (a mixture estimator needs the adapted proposal's ratio at draws it did not make).
    big: the big-claim component (core.big_claim): its ratio sum is kept for every sample, and
    the samples in big_mask get one claim of its line replaced by a big one.
    """
    lines = portfolio.lines
    proposals = proposals or [LineProposal()] * len(lines)
    stepwise = stepwise or [None] * len(lines)
    scores = scores or [None] * len(lines)
    total = np.zeros(m)
    log_lr = np.zeros(m)
    out = Draw(total, log_lr, [], [], [], [], [])
    for k, line in enumerate(lines):
        prop = proposals[k]
        sb_mask = None if size_biased is None else size_biased == k
        law = line.paid_count
        sb_law = law.size_biased_minus_one() if sb_mask is not None and sb_mask.any() else None
        counts, llr = draw_counts(law, sb_law, sb_mask, prop.count_tilt, m, rng)
        if counts.sum() > MAX_CLAIMS_PER_BLOCK:
            raise LimitError(
                "thresholds",
                f"the sampler would draw {int(counts.sum()):,} claims for {m} samples of line "
                f"{k} (limit {MAX_CLAIMS_PER_BLOCK:,}): the threshold is too far out for this "
                "proposal, or the portfolio too large",
            )
        claims, claim_llr = draw_claims(
            line.paid_severity, prop, int(counts.sum()), rng, stepwise[k]
        )
        if big is not None and big.line == k:
            if big_mask is not None:
                # The component draws the rest from the model, so no claim carries a ratio.
                assert claim_llr is None and prop.count_tilt == 0.0
                big.replace(claims, counts, big_mask, rng)
            out.big_ratio = big.ratio_sum(claims, counts)
        sums = segment_sum(claims, counts)
        if claim_llr is not None:
            llr = llr + segment_sum(claim_llr, counts)
        score = scores[k]
        out.line_scores.append(
            None if score is None else segment_sum(score(claims), counts)
        )
        out.line_sums.append(sums)
        out.line_max.append(segment_max(claims, counts))
        out.line_log_lr.append(llr)
        out.line_counts.append(counts)
        total += sums
        log_lr += llr
    return out


class TiltGrid:
    """Cells of a severity's support with their probabilities and reference points.

    Cells are equal-width on [lo, hi]; one more cell holds [hi, inf) (or a cap's atom), with
    reference point hi. Built once per (severity, hi); tilting it by any theta is cheap.
    """

    def __init__(self, sev: Severity, hi: float, *, cells: int = 1024) -> None:
        self.sev = sev
        lo = max(float(sev.support_min), float(sev.ppf(1e-12)))
        hi = max(float(hi), lo + 1e-9 * max(1.0, abs(lo)))
        self.edges = np.linspace(lo, hi, cells + 1)
        sf = np.asarray(sev.sf(self.edges), dtype=float)
        self.probs = np.append(-np.diff(sf), sf[-1])
        self.probs[0] += 1.0 - sf[0]
        self.ref = np.append(0.5 * (self.edges[:-1] + self.edges[1:]), hi)
        self.edges_sf = np.append(sf, 0.0)
        self.edges_sf[0] = 1.0
        with np.errstate(divide="ignore"):
            self.log_probs = np.log(self.probs)

    @classmethod
    def for_tilt(cls, sev: Severity, theta: float, *, cells: int = 1024) -> TiltGrid:
        """A grid wide enough that the theta-tilted law has negligible mass beyond it."""
        return cls(sev, _tilt_upper(sev, theta), cells=cells)

    @cached_property
    def edge_log_pdf(self) -> np.ndarray:
        """log density at the cell edges (for rejection within cells)."""
        return np.asarray(self.sev.logpdf(self.edges), dtype=float)

    def cell_of(self, y: np.ndarray) -> np.ndarray:
        """The cell holding each y (right-closed cells, so a cap's atom stays in the cell it
        is drawn in). Cells have equal width: no search needed."""
        lo, hi = self.edges[0], self.edges[-1]
        width = (hi - lo) / (self.edges.size - 1)
        cell = np.ceil((np.asarray(y, dtype=float) - lo) / width) - 1.0
        cell = np.where(y > hi, self.ref.size - 1, np.clip(cell, 0, self.ref.size - 2))
        return cell.astype(np.int64)

    def ref_of(self, y: np.ndarray) -> np.ndarray:
        """Reference point of the cell holding each y."""
        return np.asarray(self.ref[self.cell_of(y)], dtype=float)

    def tilt_weights(self, theta: float) -> tuple[np.ndarray, float]:
        """The cells' weights P(cell) e^{theta ref} divided by e^shift, and shift (their
        largest log): the one place the stepwise tilt's weights are computed."""
        logw = self.log_probs + theta * self.ref
        shift = float(logw.max())
        return np.exp(logw - shift), shift

    def log_w(self, theta: float) -> float:
        """log W, the stepwise cumulant of the tilt by theta (StepwiseTilt.log_w, without
        building the sampler: root finding on theta asks for it often)."""
        w, shift = self.tilt_weights(theta)
        return float(np.log(w.sum()) + shift)

    def tilted_mean_ref(self, theta: float) -> float:
        """E[ref] under the stepwise tilt by theta."""
        w, _ = self.tilt_weights(theta)
        return float(w @ self.ref / w.sum())


def _tilt_upper(sev: Severity, theta: float) -> float:
    """A point beyond which the tilted law has negligible mass (or the cap)."""
    cap = getattr(sev, "cap", None)
    if cap is not None:
        return float(cap)
    if math.isfinite(float(sev.support_max)):
        # A bounded law (generalized Pareto with xi < 0) has no mass past its top; searching
        # beyond it would stretch the cells over empty space (kappa' off by orders).
        return float(sev.support_max)
    lo = max(float(sev.support_min), float(sev.ppf(1e-12)))
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


class StepwiseTilt:
    """An exact-likelihood stand-in for an exponential tilt with no closed-form sampler.

    A cell of the grid is picked with probability proportional to P(cell) e^{theta m} (m the
    cell's reference point), and the claim is then drawn from the severity restricted to that
    cell. The likelihood ratio f/g = W e^{-theta m} is exact for this law, whatever the cell
    layout; the finer the cells, the closer it is to the true tilt. With a grid that stops
    short of the tail (TiltGrid(sev, hi)) it is a capped tilt e^{theta min(y, hi)}: beyond hi
    the law keeps the severity's own tail, so a heavy tail can be tilted too.
    """

    def __init__(self, grid: TiltGrid, theta: float) -> None:
        self.grid, self.theta = grid, theta
        w, shift = grid.tilt_weights(theta)
        self.log_w = float(np.log(w.sum()) + shift)  # log W, the stepwise cumulant
        self._weights = w / w.sum()
        # g(y) = f(y) e^{theta ref(y)} / W >= base f(y), base = min over cells of e^{theta ref}/W:
        # a share `base` of the claims comes from the severity's own (fast) sampler, the rest
        # from the residual law by cell. The same law, so the same exact ratio, drawn cheaper
        # (for a mild tilt most claims skip the inverse-cdf step).
        ratio = np.exp(np.where(grid.probs > 0, theta * grid.ref - self.log_w, np.inf))
        self.base = float(min(1.0, ratio.min()))
        residual = np.maximum(self._weights - self.base * grid.probs, 0.0)
        total = residual.sum()
        self._residual = residual / total if self.base < 1.0 and total > 0 else self._weights

    @cached_property
    def _cumulative(self) -> np.ndarray:
        # Built only when drawing: root finding on theta needs log W alone.
        c = np.cumsum(self._residual)
        return np.asarray(c / c[-1], dtype=float)

    @cached_property
    def _alias(self) -> tuple[np.ndarray, np.ndarray]:
        # The whole law's cells, for severities drawn by cell throughout (sample).
        return _alias_table(self._weights)

    @classmethod
    def for_severity(cls, sev: Severity, theta: float) -> StepwiseTilt:
        return cls(TiltGrid.for_tilt(sev, theta), theta)

    def sample(self, size: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        g = self.grid
        if getattr(g.sev, "decreasing_density", False):
            # An integrated tail's own sampler inverts by Newton: every claim is drawn by cell
            # (alias table) and within its cell by rejection, far cheaper.
            accept, alias = self._alias
            k = accept.size
            cell = np.minimum((rng.random(size) * k).astype(np.int64), k - 1)
            cell = np.where(rng.random(size) < accept[cell], cell, alias[cell])
            top, bottom = g.edges_sf[cell], g.edges_sf[cell + 1]
            u = np.clip(bottom + (top - bottom) * rng.random(size), 1e-300, 1.0)
            return _decreasing_in_cells(g, cell, u, rng), self.log_w - self.theta * g.ref[cell]
        # Every claim is first drawn from the severity; those not kept (a share 1 - base,
        # chosen claim by claim so the claims stay independent) are drawn again by cell from
        # the residual law. The ratio uses the cell each claim lies in.
        redo = np.flatnonzero(rng.random(size) >= self.base)
        y = np.asarray(g.sev.sample(size, rng), dtype=float)
        if redo.size:
            # The residual's cell by inverse cdf: only a share 1 - base of the claims gets here.
            cum = self._cumulative
            c = np.minimum(np.searchsorted(cum, rng.random(redo.size), side="right"),
                           cum.size - 1)
            top, bottom = g.edges_sf[c], g.edges_sf[c + 1]
            u = bottom + (top - bottom) * rng.random(redo.size)
            y[redo] = np.asarray(g.sev.isf(np.clip(u, 1e-300, 1.0)), dtype=float)
        return y, self.log_w - self.theta * g.ref[g.cell_of(y)]


def _decreasing_in_cells(g: TiltGrid, cell: np.ndarray, u: np.ndarray,
                         rng: np.random.Generator) -> np.ndarray:
    """Draws from the law restricted to each inner cell, for a density that never increases
    (an integrated tail: sf / mean), by rejection from the uniform law on the cell: accept y
    when V f(a) <= f(y), exact for a decreasing f; V f(a) <= f(b) accepts without evaluating
    f at all (a squeeze), which holds for all but a hazard-times-width share of the draws.
    The first cell (it holds the mass below the grid) and the open top cell invert u with the
    law's own isf. An integrated gamma tail costs one incomplete gamma per rejected draw here
    against a dozen per Newton inversion."""
    sev = g.sev
    y = np.empty(u.size)
    inner = (cell > 0) & (cell < g.ref.size - 1)
    if (~inner).any():
        y[~inner] = sev.isf(u[~inner])
    log_f = g.edge_log_pdf
    todo = np.flatnonzero(inner)
    while todo.size:
        c = cell[todo]
        a, b = g.edges[c], g.edges[c + 1]
        cand = a + (b - a) * rng.random(todo.size)
        level = np.log(rng.random(todo.size)) + log_f[c]
        ok = level <= log_f[c + 1]
        check = ~ok
        if check.any():
            ok[check] = level[check] <= np.asarray(sev.logpdf(cand[check]), dtype=float)
        y[todo[ok]] = cand[ok]
        todo = todo[~ok]
    return y


def _alias_table(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Walker's alias method (Vose's construction): O(1) draws from a discrete law."""
    k = p.size
    scaled = p * k
    accept = np.ones(k)
    alias = np.arange(k)
    small = [i for i in range(k) if scaled[i] < 1.0]
    large = [i for i in range(k) if scaled[i] >= 1.0]
    while small and large:
        s_i, l_i = small.pop(), large.pop()
        accept[s_i], alias[s_i] = scaled[s_i], l_i
        scaled[l_i] -= 1.0 - scaled[s_i]
        (small if scaled[l_i] < 1.0 else large).append(l_i)
    return accept, alias
