"""Which estimators serve a dependent portfolio, and their per-sample values in one layout.

Layout of a block of n samples at G points a and E Euler points (of m lines):
    [P(S > a) (G) | E[(S - a)+] (G) | E[S_i 1{S > a_e}] (E * m) | lower (G) | upper (G)]
where lower/upper are the exceedance of the lattice's lower and upper loss (equal to the first
block for lines whose quantiles are exact). Every column is a weighted non-negative
contribution, so `ContributionStats` and the diagnostics apply unchanged.

Methods are the registry's estimators that serve dependent portfolios (ModelKind.DEPENDENT):
lognormal amounts under a gaussian copula (core.dependence.amounts) are sampled by each
method's `amount_sampler` (directional conditional MC with shifted normals, Asmussen,
Blanchet, Juneja and Rojas-Nandayapa 2011, Kortschak and Hashorva 2013; exceedance only), or
through the copula's normals by a method without one (the model itself, or the mean-shift
mixture); any other dependent portfolio goes through the copula's normals. Which methods
auto pilots, and in which order, is each estimator's `dependent_rank`.
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
from core.estimators import registry
from core.estimators.estimator import AmountSampler, Estimator, ModelKind
from core.portfolio import Portfolio

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
Values = Callable[[int, np.random.Generator], FloatArray]

DEPENDENT = ModelKind.DEPENDENT
DEPENDENT_METHODS = registry.serving(DEPENDENT)
SHIFT_SCALES = (0.25, 0.5, 0.75, 1.0)
PILOT_DRAWS = 2048  # per shift scale, shared among the pieces


def estimator(name: str) -> Estimator:
    """The registry's estimator `name`, refused at `method` unless it serves dependent
    portfolios."""
    return registry.get_for(DEPENDENT, name, "a dependent portfolio (portfolio.dependence)")


def estimator_for(name: str, portfolio: Portfolio) -> Estimator:
    """`estimator(name)`, also refused at `method` when this dependent portfolio is not one its
    samplers serve (a method whose only dependent sampler is for correlated lognormal amounts
    would otherwise have nothing of its own to run on copula-coupled lines)."""
    est = estimator(name)
    if est.copula_lines or lognormal_amounts(portfolio) is not None:
        return est
    usable = [n for n in DEPENDENT_METHODS if estimator(n).copula_lines]
    raise MethodError("method", f"{name} applies to a dependent portfolio only when it is "
                                "correlated lognormal amounts (every line one lognormal "
                                "amount, count fixed at 1, no layer, gaussian copula); for "
                                "these copula-coupled lines use one of "
                                f"{', '.join((registry.AUTO, *usable))}")


def candidates(portfolio: Portfolio, *, measures: bool) -> list[str]:
    """auto's candidates, best guess first: the estimators' own dependent_rank."""
    amounts = lognormal_amounts(portfolio)
    dim = None if amounts is None else amounts.dim
    ranked = [(rank, name) for name in DEPENDENT_METHODS
              if (rank := estimator(name).dependent_rank(dim, measures=measures)) is not None]
    return [name for _, name in sorted(ranked)]


def _quantiles(portfolio: Portfolio, smallest: float, top: float | None
               ) -> tuple[LineQuantile, ...]:
    return tuple(line_quantiles(portfolio, smallest, top))


def values(name: str, portfolio: Portfolio, a: FloatArray, anchors: Sequence[float],
           euler: IntArray, seed: int, smallest_tail: float = 1e-12,
           top: float | None = None) -> Values:
    """top: set when only exceedance columns matter (see marginals.line_quantiles)."""
    """The block function of method `name` in the layout above."""
    method = estimator_for(name, portfolio)
    amounts = lognormal_amounts(portfolio)
    g = a.size
    anchors = [float(v) for v in anchors if v > 0] or [float(np.max(a))]
    if amounts is not None and method.amount_sampler is not None:
        return _amount_values(method.amount_sampler, amounts, a, anchors, euler, seed)
    cop = portfolio.dependence
    assert cop is not None
    model = coupled.Coupled(cop, _quantiles(portfolio, smallest_tail, top))
    est = (coupled.shifted(model, anchors, seed) if method.proposal
           else coupled.crude(model))
    m = cop.dim
    e = euler.size

    def block(n: int, rng: np.random.Generator) -> FloatArray:
        v = est.values(n, rng, a, euler)
        assert v.shape[1] == 4 * g + e * m
        return v

    return block


def _amount_values(sampler: AmountSampler, amounts: Amounts, a: FloatArray,
                   anchors: list[float], euler: IntArray, seed: int) -> Values:
    g = a.size
    if sampler is AmountSampler.RADIAL:
        radial.check_thresholds(amounts, a)

        def ray(n: int, rng: np.random.Generator) -> FloatArray:
            p = radial.radial_values(amounts, n, rng, a)
            return np.hstack([p, np.zeros((n, g + euler.size * amounts.dim)), p, p])

        return ray
    if sampler is AmountSampler.ABJR:
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
