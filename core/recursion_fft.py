"""Rounding bounds for P(S > x) on fine grids by the fast Fourier transform, for books whose
lines all have Poisson or negative binomial counts.

Plain rounding (core.recursion) leaves a gap of about E[N] h f_S(x) between its bounds, so a
relative width of 1e-3 on a book of 100 claims needs millions of cells: too many for Panjer's
recursion by direct sums, few enough for one FFT of the compound transform (Embrechts and
Frei 2009, "Panjer recursion versus FFT for compound distributions"). The same rounded claim
laws are used (core.discretise), so the bounds keep their meaning; what the FFT adds is
wrap-around and round-off, both bounded here and put into the bounds:

- A claim above the threshold x makes S > x alone. Those claims are left out of the lattice
  (a defective claim law of mass 1 - b), so the inverse transform is the measure mu of S on the
  event E = "no claim above x": P(S > x) = (1 - P(E)) + mu((x, inf)), with P(E) = pgf_N(1 - b)
  exactly (for Poisson exp(-lambda b)).
- On Z_L the transform wraps mu's mass at or beyond L h onto the lattice: at most A = mu([L h,
  inf)) lands anywhere. Claims on E are <= x, so A has a Chernoff bound: A <= exp(log
  pgf_N(M(theta)) - theta L h), M(theta) = E[exp(theta X_up); X <= x], minimised over theta
  (M from the claims' lattice with each block of cells put at its top: st-larger).
- Round-off of the transform, the exponential and the inverse: |error of a sum of K entries| <=
  sqrt(K) ||error||_2, and ||error||_2 <= c u log2(L) (1 + E[N]) ||g||_2 (Higham 2002, Accuracy
  and Stability of Numerical Algorithms, sec. 24.1, for the FFT; the exponential multiplies the
  relative error of the claim transform by at most E[N] since |pgf'| <= E[N] on the unit disc);
  c = 16 (measured errors against Panjer's direct sums are 1e-2 to 1e-3 of this slack, tests).

So lower = (1 - P(E_down)) + T_down - A - slack and upper = (1 - P(E_up)) + T_up + A + slack,
where T is the sum of the transform's entries above x. Claims rounded down are the ones
rounded up moved one cell lower, so one set of cell masses serves both. The slack is
absolute (~1e-12 at 1e6 cells for 100 claims): where it is a large part of the target width,
no finer grid is tried.
"""

from __future__ import annotations

import math
import time

import numpy as np
from numpy.typing import NDArray
from scipy import fft as sp_fft
from scipy.special import logsumexp

from core.counts import NegativeBinomial, Poisson
from core.discretise import Grid, discretise
from core.portfolio import Portfolio
from core.recursion import exceedance_bounds

__all__ = ["FFT_MAX_LENGTH", "ClaimCells", "fft_bounds", "fft_eligible", "refine", "wrapped_mass"]

_Floats = NDArray[np.float64]
_Complex = NDArray[np.complex128]

FFT_MAX_LENGTH = 1 << 24  # transform length: about 130 MB per real array
_BLOCKS = 4096  # blocks of cells in the Chernoff bound's claim transform
_THETAS = np.logspace(-2.0, 3.5, 80)  # theta * x tried in the Chernoff bound
_U = 2.0**-53
_SLACK_C = 16.0


def fft_eligible(portfolio: Portfolio) -> bool:
    """Every line has a Poisson or negative binomial count (their pgf is smooth on the unit
    disc; binomial and fixed counts have the within-cell refinement of core.recursion)."""
    return all(isinstance(ln.paid_count, Poisson | NegativeBinomial) for ln in portfolio.lines)


def _log_pgf(count: Poisson | NegativeBinomial, phi: _Complex) -> _Complex:
    """log E[phi^N] for a claim transform phi (|phi| <= 1)."""
    if isinstance(count, Poisson):
        return count.mean * (phi - 1.0)
    # (1 - beta (phi - 1))^-r; its real part is >= 1, so the principal log is continuous
    return np.asarray(-count.r * np.log1p(-count.beta * (phi - 1.0)))


def _log_no_big(count: Poisson | NegativeBinomial, b: float) -> float:
    """log P(no claim of this line is above x) = log pgf(1 - b), without cancellation."""
    return float(count.log_mgf(math.log1p(-b))) if b < 1.0 else float(count.logpmf(0))


class ClaimCells:
    """One line's claim masses on the grid of `cells` cells ending at x, both roundings.

    up[k] = P((k - 1) h < X <= k h) (up[0] = P(X <= 0)) for k <= cells, above x is "big";
    down[k] = up[k + 1] (down[0] = up[0] + up[1]): X in (k h, (k + 1) h] goes to k, and only
    X > (cells + 1) h is big (a claim in (x, x + h] rounded down is x, not above it).
    """

    def __init__(self, portfolio: Portfolio, index: int, x: float, cells: int) -> None:
        line = portfolio.lines[index]
        count = line.paid_count
        assert isinstance(count, Poisson | NegativeBinomial)
        self.count = count
        wide = discretise(line.paid_severity, Grid.with_top(top=x * (cells + 1) / cells,
                                                            cells=cells + 1), "up")
        self.up = wide.pmf[: cells + 1]
        self.big_up = float(wide.pmf[cells + 1]) + wide.beyond
        self.down = wide.pmf[1 : cells + 2].copy()
        self.down[0] += wide.pmf[0]
        # wide.beyond may hold masses flush() moved there: take the tail itself
        self.big_down = min(float(line.paid_severity.sf(x * (cells + 1) / cells)),
                            wide.beyond)


def _measure(claims: list[ClaimCells], rounding: str, length: int) -> tuple[_Floats, float]:
    """(mu on Z_length: the transform's entries, claims above x left out; log P(E))."""
    log_g = np.zeros(length // 2 + 1, dtype=np.complex128)
    log_e = 0.0
    for c in claims:
        pmf, big = (c.up, c.big_up) if rounding == "up" else (c.down, c.big_down)
        log_g += _log_pgf(c.count, sp_fft.rfft(pmf, n=length))
        log_e += _log_no_big(c.count, big)
    return np.asarray(sp_fft.irfft(np.exp(log_g), n=length), dtype=np.float64), log_e


def wrapped_mass(claims: list[ClaimCells], h: float, length: int) -> float:
    """Chernoff bound of mu([length h, inf)) for the claims rounded up (rounded down they are
    smaller): min over theta of exp(sum_lines log pgf(M(theta)) - theta length h)."""
    cells = claims[0].up.size - 1
    block = -(-(cells + 1) // _BLOCKS)
    tops = (np.arange(_BLOCKS, dtype=np.float64) + 1.0) * block - 1.0  # st-larger: block top
    theta = _THETAS / (cells * h)
    total = -theta * length * h
    for c in claims:
        padded = np.zeros(_BLOCKS * block)
        padded[: c.up.size] = c.up
        w = padded.reshape(_BLOCKS, block).sum(axis=1)
        keep = w > 0
        log_m = logsumexp(np.log(w[keep])[None, :] + np.outer(theta * h, tops[keep]), axis=1)
        total = total + np.asarray(c.count.log_mgf(log_m), dtype=np.float64)
    best = float(np.min(np.where(np.isfinite(total), total, np.inf)))
    return min(1.0, math.exp(best)) if math.isfinite(best) else 1.0


def _slack(claims: list[ClaimCells], g: _Floats, terms: int) -> float:
    """Round-off bound for a sum of `terms` entries of the computed measure g: sqrt(terms) times
    the 2-norm of the error, which is c u log2(L) (1 + E[N]) ||g||_2 (module note)."""
    mean = sum(float(c.count.mean) for c in claims)
    norm = float(np.linalg.norm(g))
    return _SLACK_C * _U * math.log2(g.size) * (1.0 + mean) * norm * math.sqrt(max(terms, 1))


def fft_bounds(claims: list[ClaimCells], length: int, wrapped: float
               ) -> tuple[float, float, float]:
    """(lower, upper, round-off slack) for P(S > x), x the top of the claims' grid, the law
    computed on Z_length (length > 2 cells) with `wrapped` from wrapped_mass."""
    cells = claims[0].up.size - 1
    out, err = [], 0.0
    for rounding in ("down", "up"):
        g, log_e = _measure(claims, rounding, length)
        out.append(-math.expm1(log_e) + float(np.sum(g[cells + 1 :])))
        err = max(err, _slack(claims, g, length - cells - 1))
        del g
    return max(0.0, out[0] - wrapped - err), min(1.0, out[1] + wrapped + err), err


_PILOT_CELLS = 2048
_ROUNDS = 4
# seconds per line and per cell or transform entry until the first fine grid has been timed (a
# loaded 2-core machine; the measured rate replaces it)
_RATE_GUESS = 2.5e-6


def refine(portfolio: Portfolio, x: float, target: float, deadline: float | None
           ) -> tuple[tuple[float, float, float], int, str] | None:
    """((lower, upper, point), cells, what stopped it) for P(S > x) on grids fine enough for
    the relative half-width `target`, or None when the transform cannot help (a tail so small
    that round-off would dominate). The point is the pilot grid's extrapolated estimate
    (core.recursion), kept within the bounds; every pair of bounds is rigorous, so the
    tightest of each side is kept. Each finer grid is started only if its predicted time fits
    before the deadline (else stopped "time_limit")."""
    lo, hi, point = exceedance_bounds(portfolio, [x], cells=_PILOT_CELLS)[0]
    cells = _PILOT_CELLS

    def width() -> float:
        pt = min(max(point, lo), hi)
        return (hi - lo) / 2.0 / pt if pt > 0 else 0.0

    if width() <= target:
        return (lo, hi, min(max(point, lo), hi)), cells, "relative_error"
    if lo <= 0.0:
        return None
    gap_per_h = (hi - lo) / (x / cells)  # the rounding gap grows about linearly in h
    scale = min(max(point, lo), hi)  # the figure the target is relative to
    lines = len(portfolio.lines)
    rate, ratio = _RATE_GUESS, 2.0  # seconds per line and unit; transform length per cell
    stopped = "samples"
    first = True
    for _ in range(_ROUNDS):
        want = math.ceil(x * gap_per_h / (1.5 * target * scale))
        fine = int(min(max(want, 2 * cells), (FFT_MAX_LENGTH - 2) // 2))
        if first and deadline is not None:
            fine = max(2 * cells, fine // 8)  # a grid to time the machine on, 1/8 of the work
        if fine <= cells:
            break
        if deadline is not None:
            # cells + a transform at least twice as long, per line; a margin for bursts of
            # load on a shared machine (a three-line book overran 10 s by 48% at 0.9)
            left = (deadline - time.monotonic()) * (0.4 if first else 0.6)
            if (1 + ratio) * fine * lines * rate > left:
                fine = int(left / ((1 + ratio) * lines * rate))
                if fine < 2 * cells:
                    stopped = "time_limit"
                    break
        first = False
        began = time.monotonic()
        claims = [ClaimCells(portfolio, i, x, fine) for i in range(lines)]
        length = int(sp_fft.next_fast_len(2 * fine + 2))
        wrapped = wrapped_mass(claims, x / fine, length)
        while wrapped > 0.02 * target * scale and 2 * length <= FFT_MAX_LENGTH:
            length = int(sp_fft.next_fast_len(2 * length))
            wrapped = wrapped_mass(claims, x / fine, length)
        f_lo, f_hi, err = fft_bounds(claims, length, wrapped)
        del claims
        rate = (time.monotonic() - began) / ((fine + length) * lines)
        ratio = length / fine
        lo, hi = max(lo, f_lo), min(hi, f_hi)
        cells = fine
        gap_per_h = max((f_hi - f_lo - 2.0 * (wrapped + err)) / (x / fine), 0.0)
        if width() <= target:
            stopped = "relative_error"
            break
        if 2 * length > FFT_MAX_LENGTH or gap_per_h == 0.0 or err > 0.25 * target * scale:
            break  # no finer grid fits, or round-off is already a large part of the width
    return (lo, hi, min(max(point, lo), hi)), cells, stopped
