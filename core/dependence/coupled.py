"""Copula-coupled lines by sampling the copula's latent vector: crude and mean-shift IS.

Each sample draws the independent normals g (from the model, or from a defensive mixture of
mean shifts toward the failure region, core.dependence.shift), the mixing variable of a
student_t copula from its own law, the uniforms U = C(L g / s), and each line's loss as the
quantile F_i^{-1}(U_i) with its lattice bounds (core.dependence.marginals). The shift is
adapted by the cross-entropy method for a mean shift (Rubinstein and Kroese 2004): the
likelihood-weighted mean of g over the samples beyond a level that rises to the threshold.

Values per sample (weights = the exact mixture likelihood ratio): exceedance and stop-loss of
the midpoint loss S_mid = (S_low + S_up) / 2, the Euler terms S_i,mid 1{S_mid > a}, then the
exceedance of the lower and upper loss, which bound the grid error.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from core.dependence.copula import Copula
from core.dependence.marginals import LineQuantile
from core.dependence.shift import ShiftMixture

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
CE_SAMPLES = 4096
CE_ELITE = 0.1
CE_ROUNDS = 12


@dataclass(frozen=True)
class Coupled:
    copula: Copula
    quantiles: tuple[LineQuantile, ...]

    def losses(self, g: FloatArray, scale: FloatArray) -> tuple[FloatArray, FloatArray]:
        """(lower, upper) line losses, each (n, m), for normals g and mixing values."""
        draw = self.copula.latent(g, scale)
        lows, ups = [], []
        for i, q in enumerate(self.quantiles):
            lo, hi = q.bounds(draw.ubar[:, i])
            lows.append(lo)
            ups.append(hi)
        return np.stack(lows, axis=1), np.stack(ups, axis=1)


def draw_mixing(copula: Copula, n: int, rng: np.random.Generator, shrink: float,
                defensive: float) -> tuple[FloatArray, FloatArray]:
    """(s, log LR) of the student_t mixing s = sqrt(W / df) when W is drawn from the mixture
    defensive * chi2(df) + (1 - defensive) * shrink * chi2(df): a chi-square scaled toward 0
    is a gamma law of the same shape, so the ratio is closed-form and exact. Small W makes
    every coordinate large at once: the joint tail that gives the t copula its tail dependence.
    Gaussian copula or shrink = 1: the model itself."""
    if copula.kind == "gaussian":
        return np.ones(n), np.zeros(n)
    assert copula.df is not None
    df = copula.df
    w = rng.chisquare(df, size=n)
    pick = rng.random(n)
    if shrink >= 1.0:
        return np.sqrt(w / df), np.zeros(n)
    w = np.where(pick >= defensive, w * shrink, w)
    k = 0.5 * df
    log_g_over_f = -k * np.log(shrink) - w * (0.5 / shrink - 0.5)
    log_lr = -np.logaddexp(np.log(defensive), np.log1p(-defensive) + log_g_over_f)
    return np.sqrt(w / df), log_lr


@dataclass(frozen=True)
class CoupledEstimator:
    model: Coupled
    mixture: ShiftMixture
    shrink: float = 1.0  # scale of the student_t chi-square under the proposal

    def values(self, n: int, rng: np.random.Generator, a: FloatArray,
               euler: IntArray) -> FloatArray:
        m = self.model.copula.dim
        g = self.mixture.sample(n, rng, m)
        scale, log_w = draw_mixing(self.model.copula, n, rng, self.shrink,
                                   self.mixture.defensive)
        w = np.exp(self.mixture.log_ratio(g) + log_w)
        lo, up = self.model.losses(g, scale)
        s_lo, s_up = lo.sum(axis=1), up.sum(axis=1)
        finite = np.isfinite(up)
        # Beyond an upper lattice's top the midpoint uses the lower bound (the top): such
        # draws are counted as exceeding in the upper bound, which is where they belong.
        mid_lines = np.where(finite, 0.5 * (lo + up), lo)
        s_mid = mid_lines.sum(axis=1)
        over = s_mid[:, None] - a[None, :]
        hit = over > 0
        cols = [hit * w[:, None], np.maximum(over, 0.0) * w[:, None]]
        if euler.size:
            e_hit = hit[:, euler]
            cols.append((e_hit[:, :, None] * mid_lines[:, None, :]).reshape(n, -1)
                        * w[:, None])
        cols += [(s_lo[:, None] > a[None, :]) * w[:, None],
                 (s_up[:, None] > a[None, :]) * w[:, None]]
        return np.hstack(cols)


def cross_entropy_shift(model: Coupled, x: float, seed_rng: np.random.Generator
                        ) -> tuple[FloatArray, float]:
    """A mean shift of g (and, for student_t, a scale of the chi-square) toward {S > x} by
    the cross-entropy method with levels rising to x: the weighted mean of g over the elite,
    and the gamma scale mean(W) / shape over it (the weighted maximum-likelihood updates)."""
    m = model.copula.dim
    shift = np.zeros(m)
    shrink = 1.0
    t_copula = model.copula.kind == "student_t"
    for _ in range(CE_ROUNDS):
        mix = ShiftMixture(shift[None, :], defensive=0.0) if np.any(shift) else ShiftMixture(
            np.zeros((0, m)))
        g = mix.sample(CE_SAMPLES, seed_rng, m)
        scale, log_w = draw_mixing(model.copula, CE_SAMPLES, seed_rng, shrink, 1e-3)
        w = np.exp(mix.log_ratio(g) + log_w)
        lo, up = model.losses(g, scale)
        s = np.where(np.isfinite(up), 0.5 * (lo + up), lo).sum(axis=1)
        level = min(x, float(np.quantile(s, 1.0 - CE_ELITE)))
        elite = s >= level
        if not elite.any() or w[elite].sum() <= 0:
            break
        total = w[elite].sum()
        shift = (w[elite, None] * g[elite]).sum(axis=0) / total
        if t_copula:
            assert model.copula.df is not None
            w_elite = scale[elite] ** 2 * model.copula.df  # W = df s^2
            shrink = float(np.clip((w[elite] @ w_elite) / total / model.copula.df, 1e-3, 1.0))
        if level >= x:
            break
    return shift, shrink


def shifted(model: Coupled, anchors: Sequence[float], seed: int) -> CoupledEstimator:
    """A defensive mixture of cross-entropy shifts, one per anchor (at most three)."""
    from core.streams import Purpose, Stream

    points = sorted(set(float(v) for v in anchors))
    if len(points) > 3:
        points = [points[0], points[len(points) // 2], points[-1]]
    adapt = Stream(Purpose.ADAPT, "dependent-ce")
    found = [cross_entropy_shift(model, x, adapt.rng(seed, i)) for i, x in enumerate(points)]
    shifts = [s for s, _ in found if np.all(np.isfinite(s)) and np.linalg.norm(s) > 0]
    # One chi-square scale for the mixture: the smallest (the farthest anchor's).
    shrink = min(c for _, c in found)
    return CoupledEstimator(model, ShiftMixture(np.array(shifts).reshape(-1, model.copula.dim)),
                            shrink)


def crude(model: Coupled) -> CoupledEstimator:
    return CoupledEstimator(model, ShiftMixture(np.zeros((0, model.copula.dim))))


def log_threshold_ok(x: float) -> bool:
    return math.isfinite(x) and x > 0
