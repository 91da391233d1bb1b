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

import numpy as np
from scipy import special

from core.errors import ParameterError
from core.validate import positive, real

# Kummer's function overflows a double near t = 700; the twist never needs more than this.
MAX_TILT = 600.0
# Above this tilt (and for a >= 1) the tilted beta is drawn from a truncated gamma proposal,
# whose acceptance tends to 1 as t grows; below it from the beta law itself.
_GAMMA_SWITCH = 4.0


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
        return np.log(special.hyp1f1(self.a, self.a + self.b, t))

    def tilted_mean(self, t: np.ndarray) -> np.ndarray:
        # d/dt log 1F1(a; c; t) = (a / c) 1F1(a + 1; c + 1; t) / 1F1(a; c; t).
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        a, c = self.a, self.a + self.b
        return a / c * special.hyp1f1(a + 1, c + 1, t) / special.hyp1f1(a, c, t)

    def tilted_variance(self, t: np.ndarray) -> np.ndarray:
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        a, c = self.a, self.a + self.b
        m0 = special.hyp1f1(a, c, t)
        m1 = a / c * special.hyp1f1(a + 1, c + 1, t) / m0
        m2 = a * (a + 1) / (c * (c + 1)) * special.hyp1f1(a + 2, c + 2, t) / m0
        return np.maximum(m2 - m1 * m1, 0.0)

    def sample(self, size: int, rng: np.random.Generator) -> np.ndarray:
        return rng.beta(self.a, self.b, size)

    def sample_tilted(self, t: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One draw from e^{t_i u} f(u) / M(t_i) per entry of t (t_i >= 0), exactly.

        Beta proposal, accepted with probability e^{-t (1 - u)} (the tilt over its maximum).
        For large t and a >= 1: v = 1 - u from a gamma(b, rate t) law cut at 1, accepted with
        probability (1 - v)^{a - 1}, since e^{t u} u^{a-1} (1-u)^{b-1} = e^t e^{-t v}
        v^{b-1} (1-v)^{a-1}. Both accept with probability bounded away from 0 in their range.
        """
        t = np.minimum(np.asarray(t, dtype=float), MAX_TILT)
        out = np.empty(t.size)
        todo = np.arange(t.size)
        use_gamma = (t > _GAMMA_SWITCH) & (self.a >= 1.0)
        while todo.size:
            tt = t[todo]
            g = use_gamma[todo]
            u = np.empty(todo.size)
            ok = np.empty(todo.size, dtype=bool)
            nb = int((~g).sum())
            if nb:
                ub = rng.beta(self.a, self.b, nb)
                u[~g] = ub
                ok[~g] = rng.random(nb) < np.exp(-tt[~g] * (1.0 - ub))
            ng = int(g.sum())
            if ng:
                v = rng.gamma(self.b, 1.0 / tt[g])
                u[g] = 1.0 - v
                with np.errstate(invalid="ignore"):
                    accept = np.where(v < 1.0, np.power(np.maximum(1.0 - v, 0.0),
                                                        self.a - 1.0), 0.0)
                ok[g] = rng.random(ng) < accept
            out[todo[ok]] = u[ok]
            todo = todo[~ok]
        return out


LGD = FixedLGD | BetaLGD
