"""Which estimators serve a dependent portfolio, and their per-sample values in one layout.

Layout of a block of n samples at G points a and E Euler points (of m lines):
    [P(S > a) (G) | E[(S - a)+] (G) | E[S_i 1{S > a_e}] (E * m) | lower (G) | upper (G)]
where lower/upper are the exceedance of the lattice's lower and upper loss (equal to the first
block for lines whose quantiles are exact). Every column is a weighted non-negative
contribution, so `ContributionStats` and the diagnostics apply unchanged.

Methods: lognormal amounts under a gaussian copula (core.dependence.amounts) have
`conditional_is` (directional conditional MC with shifted normals), `conditional` (Asmussen,
Blanchet, Juneja and Rojas-Nandayapa 2011), `radial` (Kortschak and Hashorva 2013; exceedance
only), `mean_shift` and `crude`; any other dependent portfolio has `mean_shift` (IS on the
copula's normals) and `crude`.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
import numpy.typing as npt

from core.dependence import coupled, directional, radial
from core.dependence.amounts import Amounts, lognormal_amounts
from core.dependence.marginals import LineQuantile, line_quantiles
from core.dependence.shift import ShiftMixture
from core.errors import MethodError
from core.portfolio import Portfolio

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
Values = Callable[[int, np.random.Generator], FloatArray]

DEPENDENT_METHODS = ("crude", "conditional", "conditional_is", "radial", "mean_shift")
SHIFT_SCALES = (0.25, 0.5, 0.75, 1.0)
PILOT_DRAWS = 2048  # per shift scale, shared among the pieces


def candidates(portfolio: Portfolio, *, measures: bool) -> list[str]:
    amounts = lognormal_amounts(portfolio)
    if amounts is not None:
        names = ["conditional_is", "conditional", "radial", "crude"]
        if amounts.dim <= 2:
            # One design point per piece of the failure region: with more amounts than two,
            # a mixture aimed at the single best design point can miss the other amounts'
            # regions while its pilot looks precise (seen 8% low on a 20-amount one-factor
            # book), so auto keeps to the estimators that cover every piece.
            names.insert(3, "mean_shift")
        return [n for n in names if not (measures and n == "radial")]
    return ["mean_shift", "crude"]


def _quantiles(portfolio: Portfolio, smallest: float, top: float | None
               ) -> tuple[LineQuantile, ...]:
    return tuple(line_quantiles(portfolio, smallest, top))


def values(name: str, portfolio: Portfolio, a: FloatArray, anchors: Sequence[float],
           euler: IntArray, seed: int, smallest_tail: float = 1e-12,
           top: float | None = None) -> Values:
    """top: set when only exceedance columns matter (see marginals.line_quantiles)."""
    """The block function of method `name` in the layout above."""
    if name not in DEPENDENT_METHODS:
        raise MethodError("method", f"{name} does not apply to a dependent portfolio; use one "
                                    f"of auto, {', '.join(DEPENDENT_METHODS)}")
    amounts = lognormal_amounts(portfolio)
    g = a.size
    anchors = [float(v) for v in anchors if v > 0] or [float(np.max(a))]
    if amounts is not None and name != "mean_shift" and name != "crude":
        return _amount_values(name, amounts, a, anchors, euler, seed)
    cop = portfolio.dependence
    assert cop is not None
    model = coupled.Coupled(cop, _quantiles(portfolio, smallest_tail, top))
    est = coupled.crude(model) if name == "crude" else coupled.shifted(model, anchors, seed)
    m = cop.dim
    e = euler.size

    def block(n: int, rng: np.random.Generator) -> FloatArray:
        v = est.values(n, rng, a, euler)
        assert v.shape[1] == 4 * g + e * m
        return v

    return block


def _amount_values(name: str, amounts: Amounts, a: FloatArray, anchors: list[float],
                   euler: IntArray, seed: int) -> Values:
    g = a.size
    if name == "radial":
        radial.check_thresholds(amounts, a)

        def ray(n: int, rng: np.random.Generator) -> FloatArray:
            p = radial.radial_values(amounts, n, rng, a)
            return np.hstack([p, np.zeros((n, g + euler.size * amounts.dim)), p, p])

        return ray
    if name == "conditional":
        est = directional.abjr_conditional(amounts, anchors)
    else:
        est = _tuned(directional.directional_is(amounts, anchors), a, anchors, seed)

    def block(n: int, rng: np.random.Generator) -> FloatArray:
        v = est.values(n, rng, a, euler)
        p = v[:, :g]
        return np.hstack([v, p, p])

    return block


def _tuned(est: directional.LineEstimator, a: FloatArray, anchors: list[float],
           seed: int) -> directional.LineEstimator:
    """Scale the shifts by the factor with the smallest pilot relative variance at the
    largest anchor (a conditional value already follows the failure direction, so the
    second-moment optimum sits short of the design point), and share the samples among the
    pieces by the pilot's second moments (directional.allocation)."""
    from core.streams import Purpose, Stream

    x = max(anchors)
    best, best_rv = est, math.inf
    for i, lam in enumerate(SHIFT_SCALES):
        pieces = tuple(directional.Piece(p.direction, p.largest,
                                         ShiftMixture(p.mixture.shifts * lam,
                                                      p.mixture.defensive))
                       for p in est.pieces)
        cand = directional.LineEstimator(est.amounts, pieces, est.probs)
        rng = Stream(Purpose.ADAPT, "dependent-shift-pilot").rng(seed, i)
        mean, second = cand.piece_moments(PILOT_DRAWS, rng, x)
        probs = directional.allocation(est.probs, second)
        total = float(mean.sum())
        rv = float(np.sum(second / probs) / total**2 - 1.0) if total > 0 else math.inf
        if rv < best_rv:
            best, best_rv = directional.LineEstimator(est.amounts, pieces, probs), rv
    del a
    return best
