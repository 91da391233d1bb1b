"""A credit portfolio: homogeneous groups of obligors tied together by systematic factors.

Obligor j of group g defaults when b_g . Z + s_g e_j < c_g (gaussian copula), with Z the
factors (standard normal, correlation matrix R), e_j independent standard normal and
s_g = sqrt(1 - b_g' R b_g) so that the latent variable has unit variance (|b_g|^2 when the
factors are independent, as the contract writes it). Under the student_t copula the latent
variable is divided by sqrt(W / df), W chi-square(df) common to all obligors, and
c_g = t_df^{-1}(PD) so that PD stays each obligor's default probability.

Internally the factors are Z = A X with X independent standard normal and A A' = R (the
copula layer's check and factor, core.dependence.copula: Cholesky, or the eigen factor for a
semi-definite R), so b . Z = (A' b) . X: `loadings_x` holds the rows A' b_g.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from core.credit.lgd import LGD, BetaLGD, FixedLGD
from core.credit.lines import FactorLine, LineSet
from core.dependence.copula import COPULAS, check_correlation, correlation_factor
from core.errors import ParameterError
from core.validate import integer, positive, real

# Latent variables with b' R b this close to 1 leave no idiosyncratic part to speak of.
_MAX_SYSTEMATIC = 1.0 - 1e-9


@dataclass(frozen=True, kw_only=True)
class ObligorGroup:
    """count obligors alike: exposure, default probability, loss given default, loadings."""

    count: int
    exposure: float
    default_probability: float
    loss_given_default: LGD
    factor_loadings: tuple[float, ...]
    label: str = ""

    def __post_init__(self) -> None:
        integer("count", self.count, 1)
        positive("exposure", self.exposure)
        p = real("default_probability", self.default_probability)
        if not 0.0 < p < 1.0:
            raise ParameterError("default_probability", f"must be in (0, 1), got {p!r}")
        if not isinstance(self.loss_given_default, FixedLGD | BetaLGD):
            raise ParameterError("loss_given_default", "must be a FixedLGD or a BetaLGD")
        for i, b in enumerate(self.factor_loadings):
            real(f"factor_loadings.{i}", b)

    @property
    def loss_per_default_max(self) -> float:
        return self.exposure * self.loss_given_default.maximum


@dataclass(frozen=True, kw_only=True)
class CreditModel:
    """Groups on k factors with correlation R (None: independent factors), and claim lines
    loading on the same factors (core.credit.lines; a mixed book)."""

    groups: tuple[ObligorGroup, ...]
    lines: tuple[FactorLine, ...] = ()
    factors: int
    correlation: np.ndarray | None = None
    copula: str = "gaussian"
    df: float | None = None
    cholesky: np.ndarray = field(init=False, repr=False)
    # Proposals found for this model (threshold -> factor shift), reused across estimators.
    cache: dict[str, Any] = field(init=False, repr=False, compare=False,
                                  default_factory=dict)

    def __post_init__(self) -> None:
        if not self.groups:
            raise ParameterError("groups", "need at least one obligor group")
        k = integer("factors", self.factors, 0)
        if self.copula not in COPULAS:
            raise ParameterError("copula", f"must be one of {', '.join(COPULAS)}")
        if self.copula == "student_t":
            nu = positive("df", self.df)
            if nu > 1e6:
                raise ParameterError("df", f"must be <= 1e6, got {nu!r}")
        a = _cholesky(self.correlation, k)
        object.__setattr__(self, "cholesky", a)
        for g, grp in enumerate(self.groups):
            b = np.asarray(grp.factor_loadings, dtype=float)
            where = f"groups.{g}.factor_loadings"
            _check_loadings(b, a, k, where)
        for i, fl in enumerate(self.lines):
            if not isinstance(fl, FactorLine):
                raise ParameterError(f"lines.{i}", "must be a FactorLine")
            _check_loadings(np.asarray(fl.factor_loadings, dtype=float), a, k,
                            f"lines.{i}.factor_loadings")

    # -- derived arrays (one entry per group) --
    @property
    def counts(self) -> np.ndarray:
        return np.array([g.count for g in self.groups], dtype=np.int64)

    @property
    def exposures(self) -> np.ndarray:
        return np.array([g.exposure for g in self.groups], dtype=float)

    @property
    def pds(self) -> np.ndarray:
        return np.array([g.default_probability for g in self.groups], dtype=float)

    @property
    def loadings_x(self) -> np.ndarray:
        """(G, k): row g is A' b_g, the loadings on the independent factors X."""
        b = np.array([g.factor_loadings for g in self.groups], dtype=float).reshape(
            len(self.groups), self.factors)
        return np.asarray(b @ self.cholesky, dtype=float)

    @property
    def residual_sd(self) -> np.ndarray:
        bx = self.loadings_x
        return np.asarray(np.sqrt(1.0 - np.einsum("gk,gk->g", bx, bx)), dtype=float)

    @property
    def thresholds(self) -> np.ndarray:
        """c_g: Phi^{-1}(PD) (gaussian) or t_df^{-1}(PD) (student_t)."""
        if self.copula == "student_t":
            return np.asarray(stats.t.ppf(self.pds, self.df), dtype=float)
        return np.asarray(stats.norm.ppf(self.pds), dtype=float)

    @property
    def lgds(self) -> list[LGD]:
        return [g.loss_given_default for g in self.groups]

    @property
    def fixed_lgd(self) -> bool:
        return all(isinstance(g.loss_given_default, FixedLGD) for g in self.groups)

    @property
    def obligors(self) -> int:
        return int(self.counts.sum())

    @property
    def line_set(self) -> LineSet | None:
        """The claim lines on the factors (None for a book of obligors only)."""
        if not self.lines:
            return None
        found = self.cache.get("line_set")
        if found is None:
            b = np.array([fl.factor_loadings for fl in self.lines], dtype=float).reshape(
                len(self.lines), self.factors)
            found = LineSet(self.lines, np.asarray(b @ self.cholesky, dtype=float),
                            self.copula, self.df)
            self.cache["line_set"] = found
        assert isinstance(found, LineSet)
        return found

    @property
    def labels(self) -> list[str]:
        """Every part of the book: the groups, then the claim lines."""
        return ([g.label or f"group {i}" for i, g in enumerate(self.groups)]
                + [fl.label or f"line {i}" for i, fl in enumerate(self.lines)])

    @property
    def max_loss(self) -> float:
        """The loss when every obligor defaults with its largest loss given default (no
        bound once claim lines join)."""
        if self.lines:
            return math.inf
        return float(sum(g.count * g.loss_per_default_max for g in self.groups))

    @property
    def credit_mean(self) -> float:
        return float(sum(g.count * g.exposure * g.default_probability
                         * _lgd_mean(g.loss_given_default) for g in self.groups))

    @property
    def mean(self) -> float:
        return self.credit_mean + sum(fl.line.mean for fl in self.lines)

    @property
    def lattice_unit(self) -> float | None:
        """The h with every loss an integer multiple of it (fixed LGDs whose losses per default
        have a common measure), else None: the loss then has no lattice to snap a VaR to."""
        if not self.fixed_lgd or self.lines:
            return None
        units = sorted({g.exposure * g.loss_given_default.maximum for g in self.groups})
        h = units[0]
        for u in units[1:]:
            a, b = u, h
            for _ in range(64):  # Euclid on floats, with a tolerance
                if b <= 1e-9 * u:
                    break
                a, b = b, math.fmod(a, b)
                if b > 1e-9 * u and abs(b - a) <= 1e-9 * u:
                    b = 0.0
            h = a
            if h < 1e-9 * units[-1]:
                return None
        ok = all(abs(u / h - round(u / h)) <= 1e-6 for u in units)
        return h if ok else None

    @property
    def expected_defaults(self) -> float:
        return float((self.counts * self.pds).sum())


def _check_loadings(b: np.ndarray, a: np.ndarray, k: int, where: str) -> None:
    if b.size != k:
        raise ParameterError(where, f"must have {k} entries (one per factor), got {b.size}")
    systematic = float(b @ (a @ a.T) @ b) if k else 0.0
    if not systematic < _MAX_SYSTEMATIC:
        raise ParameterError(where, "the loadings' systematic variance b' R b must be "
                                    f"below 1 (|b| < 1), got {systematic:.6g}")


def _lgd_mean(lgd: LGD) -> float:
    return float(lgd.mean) if isinstance(lgd, BetaLGD) else lgd.fraction


def _cholesky(correlation: np.ndarray | None, k: int) -> np.ndarray:
    """A factor A with A A' = R (identity when absent), from the copula layer's checks."""
    if correlation is None:
        return np.eye(k)
    r = np.asarray(correlation, dtype=float)
    if r.shape != (k, k):
        raise ParameterError("correlation", f"must be a {k} x {k} matrix (one row and column "
                                            f"per factor), got shape {r.shape}")
    return correlation_factor(check_correlation(r, size=k, name="correlation"))


def group(*, count: int, exposure: float, default_probability: float,
          loss_given_default: float | LGD, factor_loadings: Sequence[float],
          label: str = "") -> ObligorGroup:
    """An ObligorGroup from plain numbers (a number for the loss given default is fixed)."""
    lgd = (loss_given_default if isinstance(loss_given_default, FixedLGD | BetaLGD)
           else FixedLGD(float(loss_given_default)))
    return ObligorGroup(count=count, exposure=exposure, default_probability=default_probability,
                        loss_given_default=lgd, factor_loadings=tuple(factor_loadings),
                        label=label)


__all__ = ["COPULAS", "CreditModel", "ObligorGroup", "group"]
