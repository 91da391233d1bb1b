"""Exact integrals along one line of a Gaussian vector: the core of every conditional estimator
for sums of correlated lognormal amounts.

Along a line g = t u + g_perp of the independent normals, the logs of the amounts are affine,
Y_j(t) = b_j + c_j t, so log S(t) = logsumexp(b + c t) is convex in t. The set {S(t) > x} is
therefore the complement of one interval (t1, t2) (t1 = -inf when every slope is >= 0), and
restricted to "amount i is the largest" (an intersection of half-lines) it is at most two
intervals. Given g_perp, t ~ N(0, 1), so the probability of the set and the integrals
E[e^{Y_j(t)} 1{t in set}] = e^{b_j + c_j^2 / 2} P(N(c_j, 1) in set) are closed forms; they give
the exceedance probability, the stop-loss transform and the Euler allocation together.

Roots: Newton's method on the convex log S from the side where it is above log x converges
monotonically (every slope >= 0, the usual case); with slopes of both signs a bisection on the
derivative finds the minimum first, then bisections on each side find the roots.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import special

FloatArray = npt.NDArray[np.float64]
_NEWTON_STEPS = 60
_BISECTIONS = 80
_TOL = 1e-11
_TIE = 1e-9  # |slope difference| below which two amounts move together along the line


def gauss_mass(lo: FloatArray, hi: FloatArray) -> FloatArray:
    """P(lo < N(0,1) < hi) without cancellation in either tail (0 where hi <= lo)."""
    upper = special.ndtr(-lo) - special.ndtr(-hi)  # accurate when lo > 0
    lower = special.ndtr(hi) - special.ndtr(lo)  # accurate when hi < 0
    out = np.where(lo > 0, upper, lower)
    return np.where(hi > lo, np.maximum(out, 0.0), 0.0)


def _log_sum(b: FloatArray, c: FloatArray, t: FloatArray) -> tuple[FloatArray, FloatArray]:
    """log S(t) and its derivative, b: (n, m), c: (m,), t: (n, G) -> (n, G) each."""
    y = b[:, None, :] + t[:, :, None] * c[None, None, :]
    top = y.max(axis=2, keepdims=True)
    e = np.exp(y - top)
    s = e.sum(axis=2)
    return np.log(s) + top[..., 0], (e @ c) / s


def _bisect(f: object, lo: FloatArray, hi: FloatArray) -> FloatArray:
    """Vectorised bisection for an increasing f with f(lo) < 0 <= f(hi)."""
    assert callable(f)
    for _ in range(_BISECTIONS):
        mid = 0.5 * (lo + hi)
        up = f(mid) >= 0
        hi = np.where(up, mid, hi)
        lo = np.where(up, lo, mid)
    return hi


def exceed_interval(b: FloatArray, c: FloatArray, log_x: FloatArray
                    ) -> tuple[FloatArray, FloatArray]:
    """(t1, t2) with {t: S(t) > x} = (-inf, t1] u [t2, inf); t1 = t2 when S > x everywhere.

    b: (n, m) intercepts, c: (m,) slopes with some c_j != 0, log_x: (G,) -> (n, G) each.
    """
    n, g = b.shape[0], log_x.size
    lx = np.broadcast_to(log_x[None, :], (n, g))
    # Slopes that are zero up to round-off (a line that holds an amount fixed) are zero.
    c = np.where(np.abs(c) <= 1e-12 * float(np.max(np.abs(c))), 0.0, c)
    pos, neg = c > 0, c < 0
    inf = np.full((n, g), np.inf)
    if not neg.any():
        # First t where one amount alone reaches x: S >= x there, right of the root.
        t = np.min((lx[:, :, None] - b[:, None, pos]) / c[pos], axis=2)
        # The amounts the line holds fixed are S's floor as t -> -inf: when they alone
        # exceed x, the whole line is in the set.
        zero = c == 0
        floor = special.logsumexp(b[:, zero], axis=1) if zero.any() else np.full(n, -np.inf)
        whole = floor[:, None] >= lx
        t = np.where(whole, 0.0, t)
        for _ in range(_NEWTON_STEPS):
            val, der = _log_sum(b, c, t)
            step = np.where(whole, 0.0, (val - lx) / der)
            t = t - step
            if np.all(np.abs(step) <= _TOL * (1.0 + np.abs(t))):
                break
        return -inf, np.where(whole, -np.inf, t)
    if not pos.any():
        # S decreasing: mirror t -> -t, where every slope is positive.
        _, t2 = exceed_interval(b, -c, log_x)
        return -t2, inf
    return _two_sided(b, c, lx)


def _two_sided(b: FloatArray, c: FloatArray, lx: FloatArray) -> tuple[FloatArray, FloatArray]:
    span = 60.0 / float(np.min(np.abs(c[c != 0]))) + float(np.max(np.abs(b)))
    shape = lx.shape
    lo, hi = np.full(shape, -span), np.full(shape, span)
    t_min = _bisect(lambda t: _log_sum(b, c, t)[1], lo, hi)
    v_min = _log_sum(b, c, t_min)[0]
    below = v_min < lx  # otherwise S > x on the whole line
    t2 = _bisect(lambda t: _log_sum(b, c, t)[0] - lx, t_min, hi)
    t1 = -_bisect(lambda t: _log_sum(b, c, -t)[0] - lx, -t_min, -lo)
    return np.where(below, t1, t_min), np.where(below, t2, t_min)


def largest_interval(b: FloatArray, c: FloatArray, i: int) -> tuple[FloatArray, FloatArray]:
    """[lo, hi] of the t where amount i is the largest (ties go to the lowest index)."""
    n = b.shape[0]
    lo, hi = np.full(n, -np.inf), np.full(n, np.inf)
    for j in range(c.size):
        if j == i:
            continue
        dc = c[i] - c[j]
        db = b[:, i] - b[:, j]  # Y_i - Y_j = db + dc t
        if abs(dc) <= _TIE:
            ok = db > _TIE if j < i else db >= -_TIE
            hi = np.where(ok, hi, -np.inf)
        elif dc > 0:
            lo = np.maximum(lo, -db / dc)
        else:
            hi = np.minimum(hi, -db / dc)
    return lo, hi


def set_pieces(t1: FloatArray, t2: FloatArray, lo: FloatArray | None, hi: FloatArray | None
               ) -> list[tuple[FloatArray, FloatArray]]:
    """The (<= 2) intervals of {t <= t1 or t >= t2} within [lo, hi], each (n, G)."""
    if lo is None or hi is None:
        return [(np.full_like(t1, -np.inf), t1), (t2, np.full_like(t2, np.inf))]
    lo2 = np.broadcast_to(lo[:, None], t1.shape)
    hi2 = np.broadcast_to(hi[:, None], t1.shape)
    return [(lo2, np.minimum(hi2, t1)), (np.maximum(lo2, t2), hi2)]


_CELLS = 1 << 22  # bound on n * G * m floats held at once


def line_functionals(
    b: FloatArray, c: FloatArray, log_x: FloatArray, *, largest: int | None = None,
    euler: npt.NDArray[np.int64] | None = None,
) -> tuple[FloatArray, FloatArray, FloatArray | None]:
    """Given g_perp, with t ~ N(0, 1): P(set), E[(S - x) 1{set}] and E[X_j 1{set}] at the
    columns `euler` of log_x (None: not computed).

    The set is {S(t) > x}, within {amount `largest` is the largest} when given.
    Shapes: (n, G), (n, G), (n, len(euler), m). Rows are done in slices of bounded memory.
    """
    n = b.shape[0]
    c = np.where(np.abs(c) <= 1e-12 * float(np.max(np.abs(c))), 0.0, c)
    rows = max(1, _CELLS // max(1, log_x.size * c.size))
    if n > rows:
        parts = [line_functionals(b[k:k + rows], c, log_x, largest=largest, euler=euler)
                 for k in range(0, n, rows)]
        eu = None if euler is None else np.concatenate(
            [p[2] for p in parts if p[2] is not None])
        return (np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]),
                eu)
    return _functionals(b, c, log_x, largest, euler)


def _functionals(
    b: FloatArray, c: FloatArray, log_x: FloatArray, largest: int | None,
    euler: npt.NDArray[np.int64] | None,
) -> tuple[FloatArray, FloatArray, FloatArray | None]:
    t1, t2 = exceed_interval(b, c, log_x)
    lo = hi = None
    if largest is not None:
        lo, hi = largest_interval(b, c, largest)
    pieces = set_pieces(t1, t2, lo, hi)
    prob = sum((gauss_mass(a, z) for a, z in pieces), np.zeros_like(t1))
    # e^{b_j + c_j^2/2} P(N(c_j, 1) in set): the amounts' partial means on the set.
    scale = np.exp(b + 0.5 * c[None, :] ** 2)  # (n, m)
    total = np.zeros_like(t1)
    eu = None if euler is None else np.zeros((t1.shape[0], euler.size, c.size))
    for j in range(c.size):
        mass = sum((gauss_mass(a - c[j], z - c[j]) for a, z in pieces), np.zeros_like(t1))
        mass *= scale[:, j:j + 1]
        total += mass
        if eu is not None and euler is not None:
            eu[:, :, j] = mass[:, euler]
    stop = np.maximum(total - np.exp(log_x)[None, :] * prob, 0.0)
    return prob, stop, eu
