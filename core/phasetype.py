"""Matrix formulas of the phase-type law (the `PhaseType` severity in core.severities uses them).

A phase-type law is the absorption time of a Markov jump process with transient phases whose
sub-generator is T, started in phase i with probability alpha_i. With t = -T 1 the exit rates:

    f(x) = alpha expm(T x) t,   sf(x) = alpha expm(T x) 1,   M(s) = alpha (-s I - T)^-1 t.

Far tails: T has a real dominant eigenvalue -eta (Perron-Frobenius for Metzler matrices), so
expm(T x) = exp(-eta x) expm((T + eta I) x) and the second factor grows at most polynomially; the
log survival is therefore -eta x + log(alpha expm((T + eta I) x) 1) and never underflows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.linalg import expm

from core.errors import ParameterError

_Floats = NDArray[np.float64]

__all__ = ["PhaseTypeParts", "phase_type_parts"]


@dataclass(frozen=True, eq=False)
class PhaseTypeParts:
    """Validated arrays of a phase-type law and the formulas that use them."""

    alpha: _Floats
    T: _Floats
    exit: _Floats
    decay: float  # eta: minus the dominant (real) eigenvalue of T

    @property
    def phases(self) -> int:
        return int(self.alpha.size)

    def _shifted_expm(self, x: _Floats) -> _Floats:
        """expm((T + eta I) x) for every x, as an (n, m, m) stack."""
        shifted = self.T + self.decay * np.eye(self.phases)
        return np.asarray(expm(x[:, None, None] * shifted[None, :, :]), dtype=np.float64)

    def log_sf(self, x: _Floats) -> _Floats:
        vec = np.einsum("i,nij,j->n", self.alpha, self._shifted_expm(x), np.ones(self.phases))
        return np.log(np.maximum(vec, np.finfo(float).tiny)) - self.decay * x

    def log_pdf(self, x: _Floats) -> _Floats:
        vec = np.einsum("i,nij,j->n", self.alpha, self._shifted_expm(x), self.exit)
        with np.errstate(divide="ignore"):
            return np.log(np.maximum(vec, 0.0)) - self.decay * x

    def moment(self, k: int) -> float:
        """E[X^k] = k! alpha (-T)^-k 1."""
        inv = np.linalg.inv(-self.T)
        vec = np.linalg.matrix_power(inv, k) @ np.ones(self.phases)
        return float(math.factorial(k) * (self.alpha @ vec))

    def lev(self, t: _Floats) -> _Floats:
        """E[min(X, t)] = alpha (-T)^-1 (I - expm(T t)) 1."""
        inv = np.linalg.inv(-self.T)
        ones = np.ones(self.phases)
        e_t = self._shifted_expm(t) * np.exp(-self.decay * t)[:, None, None]
        rest = np.einsum("nij,j->ni", e_t, ones)
        return np.asarray((ones - rest) @ (self.alpha @ inv), dtype=np.float64)

    def lev2(self, t: _Floats) -> _Floats:
        """E[min(X, t)^2] = 2 alpha [t T^-1 e^{Tt} - T^-2 (e^{Tt} - I)] 1 (by parts on x e^{Tx})."""
        inv_t = np.linalg.inv(self.T)
        ones = np.ones(self.phases)
        e_t = self._shifted_expm(t) * np.exp(-self.decay * t)[:, None, None]
        e1 = np.einsum("nij,j->ni", e_t, ones)  # e^{Tt} 1 for each t
        first = t[:, None] * (e1 @ inv_t.T)  # T^-1 e^{Tt} 1 (T^-1 commutes with e^{Tt})
        second = (e1 - ones) @ (inv_t @ inv_t).T
        return np.asarray(2.0 * (first - second) @ self.alpha, dtype=np.float64)

    def mgf_terms(self, theta: float) -> tuple[float, float, float]:
        """(M, M', M'') at theta < eta: alpha R t, alpha R^2 t, 2 alpha R^3 t, R = (-theta-T)^-1."""
        resolvent = np.linalg.inv(-theta * np.eye(self.phases) - self.T)
        v1 = resolvent @ self.exit
        v2 = resolvent @ v1
        v3 = resolvent @ v2
        return float(self.alpha @ v1), float(self.alpha @ v2), float(2.0 * (self.alpha @ v3))

    def tilted(self, theta: float) -> tuple[_Floats, _Floats]:
        """(alpha', T') of the law e^{theta x} f(x) / M(theta), again phase-type.

        With v = (-(T + theta I))^-1 t > 0 and D = diag(v): T' = D^-1 (T + theta I) D and
        alpha' = alpha D / (alpha v); then alpha' expm(T' x) t' = alpha expm((T + theta I) x) t / M.
        """
        shifted = self.T + theta * np.eye(self.phases)
        v = np.linalg.solve(-shifted, self.exit)
        new_t = shifted * v[None, :] / v[:, None]
        new_alpha = self.alpha * v / float(self.alpha @ v)
        return new_alpha, new_t

    def sample(self, size: int, rng: np.random.Generator) -> _Floats:
        """Exact draws by running the jump chain of every sample in parallel."""
        m = self.phases
        rates = -np.diag(self.T)
        jump = np.column_stack([self.T / rates[:, None], self.exit / rates])
        jump[np.arange(m), np.arange(m)] = 0.0
        cumulative = np.cumsum(jump, axis=1)
        cumulative[:, -1] = 1.0  # guard rounding so every uniform finds a target
        state = rng.choice(m, size=size, p=self.alpha)
        total = np.zeros(size)
        alive = np.arange(size)
        while alive.size:
            here = state[alive]
            total[alive] += rng.standard_exponential(alive.size) / rates[here]
            u = rng.random(alive.size)
            nxt = (u[:, None] >= cumulative[here]).sum(axis=1)
            state[alive] = nxt
            alive = alive[nxt < m]
        return total


def phase_type_parts(alpha: object, T: object) -> PhaseTypeParts:
    """Validate (alpha, T) and precompute the exit vector and the decay rate."""
    a = np.array(alpha, dtype=np.float64).copy()
    sub = np.array(T, dtype=np.float64).copy()
    if a.ndim != 1 or a.size == 0:
        raise ParameterError("alpha", f"must be a non-empty vector, got shape {a.shape}")
    if not np.all(np.isfinite(a)) or np.any(a < 0) or abs(a.sum() - 1.0) > 1e-9:
        raise ParameterError("alpha", "must be finite, >= 0 and sum to 1")
    if sub.shape != (a.size, a.size):
        raise ParameterError("T", f"must be a {a.size}x{a.size} matrix, got shape {sub.shape}")
    if not np.all(np.isfinite(sub)):
        raise ParameterError("T", "must be finite")
    off = sub - np.diag(np.diag(sub))
    if np.any(np.diag(sub) >= 0) or np.any(off < 0):
        raise ParameterError("T", "needs a negative diagonal and non-negative off-diagonal entries")
    exit_rates = -sub.sum(axis=1)
    scale = np.abs(np.diag(sub))
    if np.any(exit_rates < -1e-12 * scale):
        raise ParameterError("T", "row sums must be <= 0 (exit rates t = -T 1 are >= 0)")
    exit_rates = np.maximum(exit_rates, 0.0)
    a = a / a.sum()
    decay = -float(np.max(np.linalg.eigvals(sub).real))
    if not decay > 1e-12 * float(scale.max()):
        raise ParameterError("T", "must be non-singular (every phase must lead to absorption)")
    for arr in (a, sub, exit_rates):
        arr.setflags(write=False)
    return PhaseTypeParts(alpha=a, T=sub, exit=exit_rates, decay=decay)
