"""A defensive mixture of mean shifts of the independent normals, with its exact likelihood ratio.

g is drawn from alpha N(0, I) + (1 - alpha)/K sum_k N(delta_k, I), so the ratio of the model's
density to the mixture's is 1 / (alpha + (1 - alpha)/K sum_k exp(delta_k . g - |delta_k|^2/2)),
bounded by 1/alpha: the defensive share (Hesterberg 1995) keeps the weights bounded whatever the
shifts. The ratio is evaluated at the point drawn, whichever component drew it (the balance
heuristic of Veach and Guibas 1995 / Owen and Zhou 2000), so it is exact for the law sampled.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from scipy import special

FloatArray = npt.NDArray[np.float64]
DEFENSIVE = 0.1


@dataclass(frozen=True)
class ShiftMixture:
    """shifts: (K, d) mean shifts (K may be 0: the model itself); defensive: alpha."""

    shifts: FloatArray
    defensive: float = DEFENSIVE

    @property
    def dim(self) -> int:
        return int(self.shifts.shape[1])

    def sample(self, n: int, rng: np.random.Generator, dim: int) -> FloatArray:
        """n draws of g (n, dim); the choice of component uses one uniform per sample, drawn
        after the normals so that the normals' stream does not depend on the shifts."""
        g = rng.standard_normal((n, dim))
        k = self.shifts.shape[0]
        if k == 0:
            return g
        pick = rng.random(n)
        comp = np.minimum((pick - self.defensive) / (1.0 - self.defensive) * k, k - 1)
        shifted = pick >= self.defensive
        idx = np.maximum(comp, 0).astype(np.int64)
        g[shifted] += self.shifts[idx[shifted]]
        return g

    def log_ratio(self, g: FloatArray) -> FloatArray:
        """log of (model density / mixture density) at each row of g."""
        k = self.shifts.shape[0]
        if k == 0:
            return np.zeros(g.shape[0])
        half = 0.5 * np.einsum("kd,kd->k", self.shifts, self.shifts)
        terms = g @ self.shifts.T - half[None, :] + np.log((1.0 - self.defensive) / k)
        if self.defensive > 0:
            terms = np.hstack([np.full((g.shape[0], 1), np.log(self.defensive)), terms])
        return np.asarray(-special.logsumexp(terms, axis=1), dtype=float)
