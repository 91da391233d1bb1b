"""One chunk's summary for core.diagnostics.ContributionStats: per estimate (column) its hits,
maximum, K largest contributions, and mean and centred sum of squares in units of a power of two.

Two ways to the same figures. A dense chunk is summarised column by column on a transposed copy.
A chunk mostly of zeros (tail indicators, stop-loss terms, likelihood ratios of missed draws; a
risk-measure block of 8,192 x 128 far-tail columns is 99% zeros) is summarised from its non-zero
entries alone: the zeros add nothing to the sums and (n - hits) mean^2 to the centred sum of
squares, and np.partition, which the dense way uses for the largest entries, slows down tenfold
on ties. The two agree to rounding (the sums run in another order), not to the bit, so which way
a chunk goes depends only on the chunk: the same seed gives the same figures on any number of
workers.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]

# Power-of-two exponent of an all-zero column: below any real exponent, so it never sets the
# common scale of a merge, and 0 * 2**anything stays 0.
EMPTY_EXPONENT = -(2**20)


class Chunk(NamedTuple):
    hits: IntArray  # (T,)
    maximum: FloatArray  # (T,)
    top: FloatArray  # (min(top_k, n), T) descending
    mean: FloatArray  # (T,) in units of 2**exponent
    m2: FloatArray  # (T,) in units of 4**exponent
    exponent: IntArray  # (T,)


def summarise(v: FloatArray, top_k: int) -> Chunk | None:
    """The chunk's summary, or None when an entry is negative, NaN or infinite."""
    if 2 * np.count_nonzero(v) < v.size:
        return _sparse(v, top_k)
    return _dense(v, top_k)


def _exponents(biggest: FloatArray) -> IntArray:
    return np.where(biggest > 0, np.frexp(biggest)[1], EMPTY_EXPONENT).astype(np.int64)


def _dense(v: FloatArray, top_k: int) -> Chunk | None:
    # One estimate per contiguous row: numpy reduces along the last axis many times faster.
    rows = np.ascontiguousarray(v.T)
    biggest = rows.max(axis=1)
    # min >= 0 is False for NaN, and a finite max rules out +inf.
    if not (np.all(rows.min(axis=1) >= 0) and np.all(np.isfinite(biggest))):
        return None
    exponent = _exponents(biggest)
    scaled = _times_power_of_two(rows, -np.where(biggest > 0, exponent, 0))
    mean = scaled.mean(axis=1)
    dev = scaled - mean[:, None]
    m2 = np.einsum("ij,ij->i", dev, dev)
    hits = np.count_nonzero(rows, axis=1).astype(np.int64)
    return Chunk(hits, biggest, _largest_dense(rows, top_k).T.copy(), mean, m2, exponent)


def _sparse(v: FloatArray, top_k: int) -> Chunk | None:
    n, t = v.shape
    where, x = _nonzeros(v)
    j = where % t
    # x > 0 is False for NaN and for negatives; a finite max rules out +inf.
    if x.size and not (np.all(x > 0) and np.isfinite(x.max())):
        return None
    j, x, starts, hits = _by_column(j, x, t)
    biggest = np.zeros(t)
    biggest[hits > 0] = x[starts[hits > 0]]  # each column's first entry is its largest
    exponent = _exponents(biggest)
    scaled = np.ldexp(x, -np.where(biggest > 0, exponent, 0)[j])  # exact
    mean = np.bincount(j, weights=scaled, minlength=t) / n
    dev = scaled - mean[j]
    m2 = np.bincount(j, weights=dev * dev, minlength=t) + (n - hits) * mean * mean
    return Chunk(hits, biggest, _top(j, x, starts, min(top_k, n), t), mean, m2, exponent)


def _by_column(j: IntArray, x: FloatArray, t: int
               ) -> tuple[IntArray, FloatArray, IntArray, IntArray]:
    """Non-zero entries sorted by column, then descending; where each column starts; hits."""
    order = np.lexsort((-x, j))
    j, x = j[order], x[order]
    return j, x, np.searchsorted(j, np.arange(t)), np.bincount(j, minlength=t).astype(np.int64)


def _top(j: IntArray, x: FloatArray, starts: IntArray, k: int, t: int) -> FloatArray:
    """(k, T): each column's k largest entries, descending, padded with zeros."""
    rank = np.arange(j.size) - starts[j]
    keep = rank < k
    top = np.zeros((k, t))
    top[rank[keep], j[keep]] = x[keep]
    return top


def largest(rows: FloatArray, k: int) -> FloatArray:
    """The k largest entries of each row of non-negative values (all if fewer), descending;
    shape (T, <= k). For merges of the chunks' K largest."""
    m = rows.shape[1]
    if m > k and 2 * np.count_nonzero(rows) < rows.size:
        where, x = _nonzeros(rows)
        j, x, starts, _ = _by_column(where // m, x, rows.shape[0])
        return _top(j, x, starts, k, rows.shape[0]).T
    return _largest_dense(rows, k)


def _largest_dense(rows: FloatArray, k: int) -> FloatArray:
    m = rows.shape[1]
    if m > k:
        rows = np.partition(rows, m - k, axis=1)[:, m - k:]
    return np.sort(rows, axis=1)[:, ::-1]


def _nonzeros(a: FloatArray) -> tuple[IntArray, FloatArray]:
    """Flat indices and values of the non-zero entries (NaN included), in row-major order."""
    flat = a.ravel()
    where = np.flatnonzero(flat != 0)  # a mask first: np.nonzero on floats is 10x slower
    return where, flat[where]


def _times_power_of_two(rows: FloatArray, powers: IntArray) -> FloatArray:
    """rows * 2**powers (one power per row), exactly; a multiply is ~15x faster than ldexp."""
    if np.all(np.abs(powers) < 1000):  # 2**power is a normal float: the product is exact
        return rows * np.ldexp(1.0, powers)[:, None]
    return np.ldexp(rows, powers[:, None])
