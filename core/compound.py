"""The aggregate law of one line on a lattice: Panjer's recursion of the (a, b, 0) class for
Poisson and negative binomial counts, the count series sum_n P(N = n) X^{*n} for far tails and
other counts, repeated squaring for fixed counts (used by core.recursion, which explains the
bounds they give).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import stats
from scipy.linalg import solve_triangular

from core.counts import Binomial, ClaimCount, Fixed, NegativeBinomial, Poisson
from core.discretise import (
    TINY,
    Lattice,
    convolution_power,
    convolve,
    convolve_window,
    flush,
    point_mass,
)
from core.errors import LimitError, ParameterError

_Floats = NDArray[np.float64]
_LEAF = 64  # the Panjer recursion solves ranges this short as one triangular system
# The recursion starts from P(S = 0) and zeroes values below TINY (1e-150) on the way, so its
# start must stay well above TINY: a count with log P(S = 0) below this is split into equal
# independent parts (Poisson and negative binomial laws are infinitely divisible).
_LOG_START_MIN = -300.0
# Panjer's mass beyond the top is 1 - sum, good to ~1e-16 absolute: the bounds are widened by
# this much, and below COMPLEMENT_MIN the exact count series is used instead.
_COMPLEMENT_SLACK = 1e-13
COMPLEMENT_MIN = 1e-6
_SERIES_TAIL = 1e-40  # P(N > M) left out of the count series (kept in the upper bound)
_SERIES_MAX = 1 << 16
_WORK_MAX = 1e12  # multiply-adds allowed for one count series (about a minute)


# ------------------------------------------------------------------------ Panjer recursion


def _panjer(f: _Floats, a: float, b: float, log_start: float) -> _Floats:
    """P(S = k), k < len(f), for a count law of the (a, b, 0) class and claim masses f.

    Panjer's recursion g_k = sum_j (a + b j / k) f_j g_{k-j} / (1 - a f_0), written with the
    weight split as a (k - j)/k + (a + b) j/k so that both parts are >= 0 whenever a >= 0 and
    a + b > 0 (Poisson: a = 0; negative binomial: a = beta/(1+beta), a + b = a r > 0):

        k (1 - a f_0) g_k = a sum_j f_j (k - j) g_{k-j} + (a + b) sum_j j f_j g_{k-j}.

    Both sums are convolutions of known claim masses with already computed g. They are done by
    divide and conquer: solve the first half of a range, add its whole contribution to the second
    half with one blocked convolution, then solve the second half. Short ranges are a small
    triangular system whose forward substitution again adds positive terms only.
    """
    n = f.size
    g, acc_a, acc_ab = np.zeros(n), np.zeros(n), np.zeros(n)
    k_all = np.arange(n, dtype=np.float64)
    jf = k_all * f
    ab = a + b
    diag = k_all * (1.0 - a * f[0])
    diag[0] = 1.0
    start = math.exp(log_start)

    def leaf(lo: int, hi: int) -> None:
        k = np.arange(lo, hi)
        lag = k[:, None] - k[None, :]
        lag_ok = np.maximum(lag, 0)
        weight = np.where(lag > 0, a * f[lag_ok] * k[None, :] + ab * jf[lag_ok], 0.0)
        rhs = a * acc_a[lo:hi] + ab * acc_ab[lo:hi]
        if lo == 0:
            rhs[0], weight[0, :] = start, 0.0
        values = _forward_substitution(np.diag(diag[lo:hi]) - weight, rhs)
        g[lo:hi] = np.where(values < TINY, 0.0, values)
        if lo == 0:
            g[0] = start

    def solve(lo: int, hi: int) -> None:
        if hi - lo <= _LEAF:
            leaf(lo, hi)
            return
        mid = (lo + hi) // 2
        solve(lo, mid)
        span = hi - lo
        acc_ab[mid:hi] += convolve_window(g[lo:mid], jf[:span], mid - lo, span)
        if a != 0.0:
            acc_a[mid:hi] += convolve_window(k_all[lo:mid] * g[lo:mid], f[:span], mid - lo, span)
        solve(mid, hi)

    solve(0, n)
    return g


def _forward_substitution(matrix: _Floats, rhs: _Floats) -> _Floats:
    # lower triangular with a positive diagonal and non-positive entries below it: every step of
    # the substitution adds non-negative terms
    return np.asarray(solve_triangular(matrix, rhs, lower=True, check_finite=False))


def _panjer_compound(claim: Lattice, a: float, b: float, log_start: float) -> Lattice:
    """Compound law from the recursion. Claim mass too small to keep (see discretise.TINY) is
    read as a claim of 0, so P(S = 0) and the recursion use one consistent claim law."""
    f = claim.pmf.copy()
    moving = math.fsum(f[1:]) + claim.beyond  # P(claim > 0)
    f[0] = max(0.0, 1.0 - moving)
    g = _panjer(f, a, b, log_start)
    # The recursion gives P(S = k) for k <= K only, so here (and only here) the mass beyond the
    # top is a complement. Its round-off is about 1e-16 absolute; the bounds are widened by
    # _COMPLEMENT_SLACK, and aggregate() switches to the count series when the tail is small.
    beyond = max(0.0, 1.0 - math.fsum(g))
    if claim.rounding == "up":
        beyond = min(1.0, beyond + _COMPLEMENT_SLACK)
    elif claim.rounding == "down":
        beyond = max(0.0, beyond - _COMPLEMENT_SLACK)
    return flush(Lattice(pmf=g, beyond=beyond, rounding=claim.rounding))


def _poisson(claim: Lattice, mean: float) -> Lattice:
    moving = math.fsum(claim.pmf[1:]) + claim.beyond
    parts = _parts(-mean * moving)
    base = _panjer_compound(claim, 0.0, mean / parts, -mean * moving / parts)
    return convolution_power(base, parts)


def _negative_binomial(claim: Lattice, count: NegativeBinomial) -> Lattice:
    moving = math.fsum(claim.pmf[1:]) + claim.beyond
    log_start = -count.r * math.log1p(count.beta * moving)  # P(S = 0) = (1 + beta P(X>0))^-r
    parts = _parts(log_start)
    a = count.beta / (1.0 + count.beta)
    base = _panjer_compound(claim, a, (count.r / parts - 1.0) * a, log_start / parts)
    return convolution_power(base, parts)


def _parts(log_start: float) -> int:
    return max(1, math.ceil(log_start / _LOG_START_MIN))


# ------------------------------------------------------------------------ count series


def _count_tail(count: ClaimCount) -> Any:
    """The scipy law of the count, for far-tail P(N > m) (computed without complements)."""
    if isinstance(count, Poisson):
        return stats.poisson(count.mean)
    if isinstance(count, NegativeBinomial):
        return stats.nbinom(count.r, 1.0 / (1.0 + count.beta))
    raise ParameterError("count", f"no count series for {count!r}")


def _series_length(count: ClaimCount) -> int:
    """Smallest M with P(N > M) <= _SERIES_TAIL."""
    law = _count_tail(count)
    hi = max(1, math.ceil(count.mean))
    while law.sf(hi) > _SERIES_TAIL:
        hi *= 2
        if hi > _SERIES_MAX:
            raise LimitError(
                "grid",
                f"the count {count!r} has P(N > {_SERIES_MAX}) > {_SERIES_TAIL:g}: its far tail "
                "is too long for the exact count series; ask for a larger threshold-probability "
                "or use a Monte Carlo method",
            )
    lo = hi // 2
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (lo, mid) if law.sf(mid) <= _SERIES_TAIL else (mid, hi)
    return hi


def _combine(weights: _Floats, laws: Sequence[Lattice]) -> Lattice:
    """sum_i weights[i] laws[i] (weights may be fewer than laws)."""
    pmf = np.zeros(laws[0].cells + 1)
    beyond = 0.0
    for w, law in zip(weights, laws[: weights.size], strict=True):
        if w > 0.0:
            pmf += w * law.pmf
            beyond += w * law.beyond
    return Lattice(pmf=pmf, beyond=beyond, rounding=laws[0].rounding)


def _add(a: Lattice, b: Lattice) -> Lattice:
    return Lattice(pmf=a.pmf + b.pmf, beyond=a.beyond + b.beyond, rounding=a.rounding)


def _check_series_work(count: ClaimCount, convolutions: int, cells: int) -> None:
    work = convolutions * (cells + 1) ** 2 / 2
    if work > _WORK_MAX:
        raise LimitError(
            "grid",
            f"the exact tail for {count!r} needs {convolutions} convolutions of {cells + 1} "
            f"cells ({work:.2g} multiply-adds, limit {_WORK_MAX:.2g}); use fewer cells or a "
            "Monte Carlo method",
        )


def _count_series(claim: Lattice, count: ClaimCount) -> Lattice:
    """sum_{n <= M} P(N = n) claim^{*n}, with P(N > M) <= _SERIES_TAIL put beyond the top for
    an upper bound (dropped otherwise): exact in the far tail, positive terms only.

    The polynomial in the claim law is evaluated by Paterson and Stockmeyer's baby-step
    giant-step scheme: the powers 0 .. s-1 with s ~ sqrt(M + 1), then Horner's rule in
    claim^{*s}; about 2 sqrt(M) convolutions instead of M.
    """
    m = _series_length(count)
    weights = np.asarray(count.pmf(np.arange(m + 1)), dtype=np.float64)
    s = max(1, math.isqrt(m + 1))
    _check_series_work(count, s + (m + 1) // s, claim.cells)
    powers = [point_mass(claim)]
    while len(powers) <= s:  # one more than needed: the last one is the giant step
        powers.append(convolve(powers[-1], claim) if len(powers) > 1 else claim)
    giant = powers.pop()
    blocks = [_combine(weights[j : j + s], powers) for j in range(0, m + 1, s)]
    total = blocks.pop()
    for block in reversed(blocks):
        total = _add(convolve(giant, total), block)
    if claim.rounding == "up":
        rest = float(_count_tail(count).sf(m))
        total = Lattice(pmf=total.pmf, beyond=min(1.0, total.beyond + rest), rounding="up")
    return flush(total)


def compound(count: ClaimCount, claim: Lattice, *, exact_tail: bool = False) -> Lattice:
    """The law of the sum of N independent claims (claim law on a lattice), N ~ count.

    Poisson and negative binomial counts use Panjer's recursion, or with `exact_tail` the count
    series, which carries the mass beyond the top exactly (for far tails, below ~1e-6).
    """
    if isinstance(count, Fixed):
        return convolution_power(claim, count.n)
    if isinstance(count, Binomial):
        # each trial pays a claim with the count's probability, else nothing
        p = count.probability
        pmf = p * claim.pmf
        pmf[0] += 1.0 - p
        trial = flush(Lattice(pmf=pmf, beyond=p * claim.beyond, rounding=claim.rounding))
        return convolution_power(trial, count.trials)
    if exact_tail and isinstance(count, Poisson | NegativeBinomial):
        return _count_series(claim, count)
    if isinstance(count, Poisson):
        return _poisson(claim, count.mean)
    if isinstance(count, NegativeBinomial):
        return _negative_binomial(claim, count)
    raise ParameterError("count", f"the recursion does not know the count law {count!r}")
