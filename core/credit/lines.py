"""Insurance lines on the credit factors: one dependence model for a mixed book.

A claim line i of a book with obligor groups loads on the same systematic factors Z: its
latent variable is Y_i = b_i . Z + sqrt(1 - b_i' R b_i) e_i (e_i standard normal, independent
of everything else), divided by sqrt(W / df) under the student_t copula like every obligor's,
and its period loss is S_i = F_i^{-1}(U_i) with U_i = Phi(-Y_i) (t_df(-Y_i) for student_t):
each line keeps its own compound law as marginal (Sklar), and the factors couple it to the
defaults. Like an obligor's, a line's latent variable is adverse when low (an obligor
defaults when its latent is low, a line loses most then), so loadings of the same sign make
defaults and claims rise together, and the correlation b_i' R b_j of two latent variables is
the sign of the dependence of their losses (the contract's reading of factor_loadings).
F_i^{-1} comes from the deterministic lattice (core.dependence.marginals): lower and upper
quantiles bound the grid error sample by sample, and both are carried to the figures.

The lines' idiosyncratic normals are drawn after everything else in a block, so a book
without lines draws exactly what it drew before.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from scipy import special

from core.dependence.marginals import LineQuantile, line_quantiles
from core.errors import ParameterError
from core.portfolio import Line, Portfolio
from core.validate import real

FloatArray = npt.NDArray[np.float64]
# The smallest tail the lines' lattices resolve (their tops sit where the tail is 1e-3 of it).
LINE_TAIL = 1e-10


@dataclass(frozen=True, kw_only=True)
class FactorLine:
    """A claim line whose period loss loads on the book's factors with loadings b."""

    line: Line
    factor_loadings: tuple[float, ...]

    def __post_init__(self) -> None:
        if not isinstance(self.line, Line):
            raise ParameterError("line", "must be a Line")
        for i, b in enumerate(self.factor_loadings):
            real(f"factor_loadings.{i}", b)

    @property
    def label(self) -> str:
        return self.line.label or ""


@dataclass
class LineLosses:
    lo: FloatArray  # (m, L) lower lattice quantiles
    mid: FloatArray  # (m, L) midpoints (the lower bound where the upper one is infinite)
    hi: FloatArray  # (m, L) upper quantiles (inf beyond a lattice's top)


class LineSet:
    """The lines of a book with their loadings on the independent factors X (rows A' b_i)."""

    def __init__(self, lines: tuple[FactorLine, ...], loadings_x: FloatArray,
                 copula: str, df: float | None) -> None:
        self.lines = lines
        self.loadings_x = loadings_x
        self.residual_sd = np.sqrt(np.maximum(1.0 - np.einsum("ik,ik->i", loadings_x,
                                                              loadings_x), 0.0))
        self.copula, self.df = copula, df
        self._quantiles: tuple[LineQuantile, ...] | None = None

    @property
    def quantiles(self) -> tuple[LineQuantile, ...]:
        if self._quantiles is None:
            book = Portfolio(lines=[fl.line for fl in self.lines])
            self._quantiles = tuple(line_quantiles(book, LINE_TAIL))
        return self._quantiles

    def losses(self, x: FloatArray, w: FloatArray | None, e: FloatArray) -> LineLosses:
        """Each line's loss bounds given the independent factors x (m, k), W (t copula) and
        the lines' own normals e (m, L)."""
        y = x @ self.loadings_x.T + e * self.residual_sd[None, :]
        if w is not None:
            y = y / np.sqrt(w / float(self.df or 1.0))[:, None]
        # 1 - U = P(latent' < Y) = Phi(Y): the upper-tail uniform is small when Y is low.
        ubar = special.ndtr(y) if w is None else special.stdtr(float(self.df or 1.0), y)
        lo, hi = np.empty_like(y), np.empty_like(y)
        for i, q in enumerate(self.quantiles):
            lo[:, i], hi[:, i] = q.bounds(np.asarray(ubar[:, i], dtype=float))
        mid = np.where(np.isfinite(hi), 0.5 * (lo + hi), lo)
        return LineLosses(lo, mid, hi)

    def design_point(self, i: int, target: float) -> tuple[FloatArray, float]:
        """(factor shift, own-normal shift) of the most likely way line i alone reaches
        `target` (gaussian latent scale): Y_i = b . X + s e at the level -y*, y* the normal
        quantile of the line's tail at the target, whose nearest point to 0 is -y* (b, s) as
        |b|^2 + s^2 = 1."""
        ubar = self._tail(i, target)
        y = float(-special.ndtri(ubar)) if 0.0 < ubar < 1.0 else 0.0
        if self.df is not None and 0.0 < ubar < 1.0:
            y = float(-special.stdtrit(self.df, ubar))
        y = max(y, 0.0)  # the line's loss is large where its latent is at -y
        return -y * self.loadings_x[i], -y * float(self.residual_sd[i])

    def remaining_shift(self, i: int, mu: FloatArray, delta: float, factors: FloatArray
                        ) -> float:
        """The own-normal shift that, with the factors at `factors`, puts line i's latent at
        the level of its design point (mu, delta); none when the factors already reach it."""
        s = float(self.residual_sd[i])
        b = self.loadings_x[i]
        level = float(mu @ b) + s * delta  # = -y*, the design point's latent level
        if s <= 0.0:
            return 0.0
        return min(0.0, (level - float(factors @ b)) / s)

    def _tail(self, i: int, target: float) -> float:
        """The share of upper-tail uniforms whose lower quantile exceeds `target` (the lower
        quantile is non-increasing in them: a bisection in log space)."""
        q = self.quantiles[i]
        lo, hi = -700.0, 0.0  # log ubar
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            if q.bounds(np.array([math.exp(mid)]))[0][0] > target:
                lo = mid
            else:
                hi = mid
        return math.exp(lo)

    @property
    def mean(self) -> float:
        return float(sum(fl.line.mean for fl in self.lines))

    @property
    def variance(self) -> float:
        return float(sum(fl.line.variance for fl in self.lines))

    @property
    def independent(self) -> bool:
        return bool(np.all(self.loadings_x == 0.0))
