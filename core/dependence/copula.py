"""The copula layer: a validated correlation matrix, its factor, and draws of the latent vector.

A gaussian copula couples m quantities through Z = L G, G a vector of m independent standard
normals and L L^T = R the correlation matrix; U_i = Phi(Z_i). The student_t copula divides the
same Z by the common mixing variable s = sqrt(W / df), W ~ chi-square(df), so X = Z / s is a
multivariate t vector with df degrees of freedom and U_i = T_df(X_i). One mixing variable for
all coordinates is what gives the t copula its tail dependence.

Far tails: the upper-tail uniforms 1 - U_i are returned separately (Phi(-Z), T_df(-X)) so a
quantile at 1 - 1e-14 is not rounded to 1.

Randomness: every draw takes a `numpy.random.Generator`; callers derive it from a
SeedSequence keyed by (purpose, method, group, block), so the same seed gives the same draws
however the work is split. The order of draws inside one block is fixed: first the m normals
per sample, then (student_t only) the mixing variable.

The factor is the Cholesky factor when R is positive definite, else (positive semi-definite,
e.g. comonotone coordinates) V sqrt(max(lambda, 0)) from the eigen decomposition; both satisfy
L L^T = R up to round-off.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import numpy.typing as npt
from scipy import special

from core.errors import ParameterError

__all__ = [
    "COPULAS",
    "Copula",
    "LatentDraw",
    "check_correlation",
    "correlation_factor",
]

FloatArray = npt.NDArray[np.float64]
CopulaKind = Literal["gaussian", "student_t"]
COPULAS: tuple[str, ...] = ("gaussian", "student_t")

# Round-off allowances: JSON input of a symmetric matrix is symmetric to the last digit, but a
# matrix built as B B^T in floating point is only symmetric and PSD to ~1e-15 relative.
SYMMETRY_TOL = 1e-10
DIAGONAL_TOL = 1e-10
PSD_TOL = 1e-10


def check_correlation(
    matrix: object, *, size: int | None = None,
    name: str = "portfolio.dependence.correlation",
) -> FloatArray:
    """A valid correlation matrix as a float array, else ParameterError naming the entry.

    Checks in order: a square list of lists of finite numbers, the expected size, entries in
    [-1, 1], unit diagonal, symmetry, positive semi-definiteness (the message gives the
    smallest eigenvalue). Locations are `name.i` (row) or `name.i.j` (entry), 0-based.
    """
    rows = _as_rows(matrix, name)
    n = len(rows)
    if size is not None and n != size:
        raise ParameterError(name, f"must be {size} x {size} (one row and column per line), "
                                   f"got {n} rows")
    r = np.array(rows, dtype=float)
    bad = np.argwhere(~np.isfinite(r))
    if bad.size:
        i, j = (int(v) for v in bad[0])
        raise ParameterError(f"{name}.{i}.{j}", f"must be a finite number, got {r[i, j]!r}")
    bad = np.argwhere(np.abs(r) > 1.0)
    if bad.size:
        i, j = (int(v) for v in bad[0])
        raise ParameterError(f"{name}.{i}.{j}", f"must be in [-1, 1], got {r[i, j]!r}")
    off = np.flatnonzero(np.abs(np.diag(r) - 1.0) > DIAGONAL_TOL)
    if off.size:
        i = int(off[0])
        raise ParameterError(f"{name}.{i}.{i}", f"a diagonal entry must be 1, got {r[i, i]!r}")
    asym = np.argwhere(np.triu(np.abs(r - r.T) > SYMMETRY_TOL))
    if asym.size:
        i, j = (int(v) for v in asym[0])
        raise ParameterError(f"{name}.{i}.{j}", f"must equal entry [{j}][{i}] (the matrix must "
                                                f"be symmetric): {r[i, j]:g} != {r[j, i]:g}")
    r = 0.5 * (r + r.T)
    smallest = float(np.linalg.eigvalsh(r)[0])
    if smallest < -PSD_TOL * n:
        raise ParameterError(name, "must be positive semi-definite: its smallest eigenvalue is "
                                   f"{smallest:.6g}")
    return r


def _as_rows(matrix: object, name: str) -> list[list[float]]:
    if isinstance(matrix, np.ndarray):
        matrix = matrix.tolist()
    if not isinstance(matrix, list | tuple) or len(matrix) == 0:
        raise ParameterError(name, "must be a non-empty square list of rows")
    n = len(matrix)
    out: list[list[float]] = []
    for i, row in enumerate(matrix):
        if isinstance(row, np.ndarray):
            row = row.tolist()
        if not isinstance(row, list | tuple):
            raise ParameterError(f"{name}.{i}", "must be a list of numbers (a row)")
        if len(row) != n:
            raise ParameterError(f"{name}.{i}", f"must have {n} entries (the matrix must be "
                                                f"square), got {len(row)}")
        vals: list[float] = []
        for j, v in enumerate(row):
            if isinstance(v, bool) or not isinstance(v, int | float | np.floating | np.integer):
                raise ParameterError(f"{name}.{i}.{j}", f"must be a number, got {v!r}")
            vals.append(float(v))
        out.append(vals)
    return out


def correlation_factor(r: FloatArray) -> FloatArray:
    """L with L L^T = r: Cholesky when r is positive definite, else the eigen factor."""
    try:
        return np.asarray(np.linalg.cholesky(r), dtype=float)
    except np.linalg.LinAlgError:
        lam, vec = np.linalg.eigh(r)
        return np.asarray(vec * np.sqrt(np.maximum(lam, 0.0)), dtype=float)


@dataclass(frozen=True)
class LatentDraw:
    """One block of draws of the copula's latent vector.

    g: (n, m) independent standard normals; z = g L^T; scale: (n,) the mixing s = sqrt(W/df)
    (ones for gaussian); x = z / scale; u = P(X_i <= x_i) and ubar = 1 - u computed directly.
    """

    g: FloatArray
    z: FloatArray
    scale: FloatArray
    x: FloatArray
    u: FloatArray
    ubar: FloatArray


@dataclass(frozen=True, kw_only=True)
class Copula:
    """A gaussian or student_t copula of dimension m = len(correlation)."""

    kind: CopulaKind
    correlation: FloatArray
    df: float | None = None
    factor: FloatArray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if self.kind not in COPULAS:
            raise ParameterError("portfolio.dependence.copula",
                                 f"must be one of {', '.join(COPULAS)}, got {self.kind!r}")
        r = check_correlation(self.correlation)
        object.__setattr__(self, "correlation", r)
        if self.kind == "gaussian" and self.df is not None:
            raise ParameterError("portfolio.dependence.df",
                                 "a gaussian copula has no degrees of freedom; leave df out")
        if self.kind == "student_t":
            df = self.df
            if df is None:
                raise ParameterError("portfolio.dependence.df",
                                     "a student_t copula needs df (degrees of freedom > 0)")
            if isinstance(df, bool) or not (math.isfinite(float(df)) and float(df) > 0):
                raise ParameterError("portfolio.dependence.df", f"must be > 0, got {df!r}")
            object.__setattr__(self, "df", float(df))
        object.__setattr__(self, "factor", correlation_factor(r))

    @property
    def dim(self) -> int:
        return int(self.correlation.shape[0])

    @property
    def is_identity(self) -> bool:
        return bool(np.array_equal(self.correlation, np.eye(self.dim)))

    def mixing(self, n: int, rng: np.random.Generator) -> FloatArray:
        """s = sqrt(W / df), W ~ chi-square(df) (ones for the gaussian copula)."""
        if self.kind == "gaussian":
            return np.ones(n)
        assert self.df is not None
        return np.sqrt(rng.chisquare(self.df, size=n) / self.df)

    def uniforms(self, x: FloatArray) -> tuple[FloatArray, FloatArray]:
        """(U, 1 - U) of latent coordinates x (already divided by the mixing variable)."""
        if self.kind == "gaussian":
            return special.ndtr(x), special.ndtr(-x)
        assert self.df is not None
        return special.stdtr(self.df, x), special.stdtr(self.df, -x)

    def latent(self, g: FloatArray, scale: FloatArray) -> LatentDraw:
        """The latent draw for given independent normals g (n, m) and mixing values."""
        z = g @ self.factor.T
        x = z / scale[:, None]
        u, ubar = self.uniforms(x)
        return LatentDraw(g=g, z=z, scale=scale, x=x, u=u, ubar=ubar)

    def sample(self, n: int, rng: np.random.Generator, *,
               shift: FloatArray | None = None) -> LatentDraw:
        """n draws; `shift` (m,) moves the independent normals' mean (the caller owns the
        likelihood ratio exp(-shift . g + |shift|^2 / 2))."""
        g = rng.standard_normal((n, self.dim))
        if shift is not None:
            g = g + np.asarray(shift, dtype=float)[None, :]
        return self.latent(g, self.mixing(n, rng))
