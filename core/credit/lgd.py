"""Loss given default: a fixed fraction or a beta law, with the exponential tilt that the
Glasserman-Li twist needs.

The twist multiplies the joint law of an obligor's loss e * 1{default} * U by e^{theta e U}.
Given a default, U then follows the tilted law e^{t u} f(u) / M(t) with t = theta e, whose
normaliser is the moment generating function M. For a beta law M(t) = 1F1(a; a + b; t)
(Kummer's function), and the tilted law is drawn exactly by rejection (below).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import special

from core.errors import ParameterError
from core.validate import positive, real

# Kummer's function overflows a double near t = 700; the twist never needs more than this.
MAX_TILT = 600.0


@dataclass(frozen=True)
class FixedLGD:
    """Every default loses the same fraction of its exposure."""

    fraction: float

    def __post_init__(self) -> None:
        v = real("loss_given_default", self.fraction)
        if not 0.0 < v <= 1.0:
            raise ParameterError("loss_given_default", f"must be in (0, 1], got {v!r}")

    @property
    def mean(self) -> float:
        return float(self.fraction)

    @property
    def variance(self) -> float:
        return 0.0

    @property
    def maximum(self) -> float:
        return float(self.fraction)

    def log_mgf(self, t: np.ndarray) -> np.ndarray:
        return np.asarray(t, dtype=float) * self.fraction

    def tilted_mean(self, t: np.ndarray) -> np.ndarray:
        return np.full(np.shape(t), self.fraction)

    def tilted_variance(self, t: np.ndarray) -> np.ndarray:
        return np.zeros(np.shape(t))


@dataclass(frozen=True)
class BetaLGD:
    """A beta law on (0, 1) given by its mean and standard deviation."""

    mean: float
    sd: float

    def __post_init__(self) -> None:
        m = real("loss_given_default.mean", self.mean)
        s = positive("loss_given_default.sd", self.sd)
        if not 0.0 < m < 1.0:
            raise ParameterError("loss_given_default.mean", f"must be in (0, 1), got {m!r}")
        if not s * s < m * (1.0 - m):
            raise ParameterError(
                "loss_given_default.sd",
                f"must be below sqrt(mean (1 - mean)) = {math.sqrt(m * (1 - m)):.4g} for a "
                f"beta law, got {s!r}",
            )

    @property
    def a(self) -> float:
        return self.mean * self._size

    @property
    def b(self) -> float:
        return (1.0 - self.mean) * self._size

    @property
    def _size(self) -> float:
        return self.mean * (1.0 - self.mean) / (self.sd * self.sd) - 1.0

    @property
    def variance(self) -> float:
        return float(self.sd) ** 2

    @property
    def maximum(self) -> float:
        return 1.0

    def log_mgf(self, t: np.ndarray) -> np.ndarray:
        """log E[e^{t U}] = log 1F1(a; a + b; t), exact."""
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        return np.asarray(np.log(special.hyp1f1(self.a, self.a + self.b, t)), dtype=float)

    def tilted_mean(self, t: np.ndarray) -> np.ndarray:
        # d/dt log 1F1(a; c; t) = (a / c) 1F1(a + 1; c + 1; t) / 1F1(a; c; t).
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        a, c = self.a, self.a + self.b
        return np.asarray(a / c * special.hyp1f1(a + 1, c + 1, t) / special.hyp1f1(a, c, t),
                          dtype=float)

    def tilted_variance(self, t: np.ndarray) -> np.ndarray:
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        a, c = self.a, self.a + self.b
        m0 = special.hyp1f1(a, c, t)
        m1 = a / c * special.hyp1f1(a + 1, c + 1, t) / m0
        m2 = a * (a + 1) / (c * (c + 1)) * special.hyp1f1(a + 2, c + 2, t) / m0
        return np.asarray(np.maximum(m2 - m1 * m1, 0.0), dtype=float)

    def sample(self, size: int, rng: np.random.Generator) -> np.ndarray:
        return rng.beta(self.a, self.b, size)

    @cached_property
    def _proposal_table(self) -> tuple[np.ndarray, np.ndarray]:
        """log t grid and the b' in (0, b] maximising the rejection sampler's acceptance
        -log B(a, b') - log max r at each t (the B(a, b) M(t) factor does not depend on b')."""
        log_t = np.linspace(math.log(1e-3), math.log(MAX_TILT), 160)
        t = np.exp(log_t)[:, None]
        b2 = self.b * np.linspace(0.002, 1.0, 500)[None, :]
        _, log_max = _envelope(t, self.b - b2)
        score = -special.betaln(self.a, b2) - log_max
        return log_t, b2[0, np.argmax(score, axis=1)]

    def sample_tilted(self, t: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One draw from e^{t_i u} f(u) / M(t_i) per entry of t (t_i >= 0), exactly.

        Rejection from a beta(a, b') law, b' <= b: the density ratio is proportional to
        r(u) = e^{t u} (1 - u)^{b - b'}, bounded on [0, 1] with its maximum at
        u* = max(0, 1 - (b - b') / t), so u is accepted with probability r(u) / r(u*). The
        acceptance rate is B(a, b) M(t) / (B(a, b') r(u*)); b' comes from a table of its
        maximiser over t (any b' <= b gives an exact sampler, so the table need not be exact).
        """
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        grid, best = self._proposal_table
        b2 = np.interp(np.log(np.maximum(t, 1e-12)), grid, best)
        gap, log_max = _envelope(t, self.b - b2)
        out = np.empty(t.size)
        todo = np.arange(t.size)
        while todo.size:
            u = rng.beta(self.a, b2[todo])
            with np.errstate(divide="ignore"):
                log_r = t[todo] * u + gap[todo] * np.log1p(-u) - log_max[todo]
            ok = np.log(rng.random(todo.size)) < log_r
            out[todo[ok]] = u[ok]
            todo = todo[~ok]
        return out


def _envelope(t: np.ndarray, gap: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(b - b', log max_u r(u)) for r(u) = e^{t u} (1 - u)^{b - b'} on [0, 1]."""
    gap = np.maximum(gap, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        top = np.where(gap < t, 1.0 - gap / np.maximum(t, 1e-300), 0.0)
        log_max = np.where(gap > 0, t * top + gap * np.log1p(-np.minimum(top, 1.0 - 1e-16)),
                           t)
    return gap, log_max


LGD = FixedLGD | BetaLGD
