"""The interface every estimator implements, one object per method (see core.estimators.registry).

An estimator knows whether it applies to a model (`check`), whether the automatic choice should
pilot it (`candidate_rank`), how to plan the sample sets of an exceedance request (`plan`), how to
give per-sample contributions for risk measures and layers (`contributions`), which random
streams are its own (`stream`), and which ruin regime serves it (`ruin_infinite`, `ruin_finite`).
A deterministic method (no sampling) answers whole requests instead (`exceedance_bounds`,
`tail_bounds`). Every hook takes the portfolio object, so a model with more structure (dependent
lines, obligor groups) can be served by an estimator that reads it.
"""

from __future__ import annotations

from collections.abc import Sequence
from enum import StrEnum
from typing import ClassVar

import numpy as np

from core.errors import MethodError
from core.estimators.base import BlockFn, Group
from core.levels import Layer
from core.portfolio import Portfolio
from core.precision import Precision
from core.results import ExceedanceResult, TailResult


class RuinRegime(StrEnum):
    """How core.ruin serves a method (core.ruin.api maps each to its regime)."""

    SIEGMUND = "siegmund"  # tilted surplus paths to the first passage (infinite horizon)
    GEOMETRIC_SUM = "geometric_sum"  # Pollaczek-Khinchine sum on the exceedance engine
    TILTED_PATHS = "tilted_paths"  # finite horizon, exponentially tilted paths
    CRUDE_PATHS = "crude_paths"  # finite horizon, plain simulation of the paths
    BIG_JUMP = "big_jump"  # finite horizon, conditional Monte Carlo on the largest claim
    BOUNDS = "bounds"  # deterministic bounds of the Pollaczek-Khinchine sum


class ModelKind(StrEnum):
    """The kinds of model a method may serve (each has its own dispatcher: core.exceedance and
    core.measures for claims, core.dependence for copula-coupled lines, core.credit for
    obligor groups); the dispatchers read `serves` and the hooks below, never method names."""

    CLAIMS = "claims"  # independent claim lines (core.portfolio.Portfolio)
    DEPENDENT = "dependent"  # claim lines coupled by a copula (Portfolio.dependence)
    CREDIT = "credit"  # obligor groups on factors, claim lines beside them (core.credit)


class AmountSampler(StrEnum):
    """How a method samples correlated lognormal amounts (core.dependence.engine); a method
    without one uses the copula's own normals (shifted unless it draws from the model)."""

    RADIAL = "radial"  # Kortschak and Hashorva (2013), exceedance only
    ABJR = "abjr"  # Asmussen, Blanchet, Juneja and Rojas-Nandayapa (2011)
    DIRECTIONAL = "directional"  # directional conditional MC with tuned shifted normals


class Estimator:
    """One method. Subclasses set `name` and override the hooks that apply to them."""

    name: ClassVar[str]
    listing: ClassVar[int]  # position in the method lists (METHODS, the schema's literal)
    deterministic: ClassVar[bool] = False
    # Contributions are 0/1 indicators of a hit: the interval is the exact binomial one.
    indicator: ClassVar[bool] = False
    # One sample set serves every threshold of a request (plan gives a single group).
    one_sample_set: ClassVar[bool] = False
    # The estimator whose contributions place the risk-measure grid (None: this one).
    grid_pilot: ClassVar[str | None] = None
    ruin_infinite: ClassVar[RuinRegime | None] = None
    ruin_finite: ClassVar[RuinRegime | None] = None
    ruin_refusal: ClassVar[str] = ""  # why a ruin horizon (or its absence) is refused
    # The kinds of model it serves, and what it is for when it does not serve one.
    serves: ClassVar[frozenset[ModelKind]] = frozenset({ModelKind.CLAIMS})
    # Draws from a proposal (likelihood ratios), not from the model itself (crude).
    proposal: ClassVar[bool] = True
    # Dependent portfolios: the sampler of correlated lognormal amounts (None: the copula's).
    amount_sampler: ClassVar[AmountSampler | None] = None
    # Dependent portfolios other than lognormal amounts under a gaussian copula (compound
    # lines, a student_t copula): whether it samples them through the copula's normals.
    # False: only its amount_sampler serves a dependent portfolio, and it refuses the rest.
    copula_lines: ClassVar[bool] = True

    @property
    def stream(self) -> str:
        """The method component of this estimator's random streams (core.streams)."""
        return self.name

    def stream_for(self, kind: ModelKind) -> str:
        """The method component of its streams on a model of this kind: a dependent
        portfolio's draws are apart from the same method's on independent lines."""
        return f"dependent:{self.name}" if kind is ModelKind.DEPENDENT else self.name

    def dependent_rank(self, amounts: int | None, *, measures: bool) -> int | None:
        """Order among auto's candidates for a dependent portfolio (lower first), given the
        number of correlated lognormal amounts (None: copula-coupled compound lines) and
        whether the request is for risk measures; None: not a candidate."""
        return None

    def check(self, portfolio: Portfolio) -> None:
        """Raise MethodError, saying why and what to use instead, when it does not apply."""

    def applies(self, portfolio: Portfolio) -> bool:
        try:
            self.check(portfolio)
        except MethodError:
            return False
        return True

    def candidate_rank(self, portfolio: Portfolio) -> int | None:
        """Order among the automatic choice's candidates for this model (lower first: it wins
        ties of the pilot comparison); None: not a candidate."""
        return None

    def plan(self, portfolio: Portfolio, thresholds: np.ndarray, seed: int, *,
             deadline: float | None = None, samples: int | None = None) -> list[Group]:
        """Groups of thresholds sharing one sample set, for P(S > x); `deadline` (a
        time.monotonic() value) bounds any adaptation done while planning, and `samples`
        (the request's samples per set, None: unknown) sizes it. Here (a method
        whose sampler lives in its own dispatcher): its own refusal first, as it says why."""
        self.check(portfolio)
        raise MethodError("method", f"{self.name} cannot estimate exceedance probabilities")

    def contributions(self, portfolio: Portfolio, points: np.ndarray, anchors: Sequence[float],
                      seed: int, *, deadline: float | None = None) -> BlockFn:
        """Per-sample contributions at `points` for a block: an (m, 2 G) array, the first G
        columns unbiased for P(S > a_g), the last G for E[(S - a_g)+]. `anchors` are where the
        interest lies (VaR guesses, layer points), for proposals that adapt to them; past
        `deadline` (time.monotonic) a proposal stops adapting."""
        self.check(portfolio)
        raise MethodError("method", f"{self.name} cannot estimate risk measures")

    def exceedance_bounds(self, portfolio: Portfolio, thresholds: np.ndarray,
                          precision: Precision, seed: int, start: float) -> ExceedanceResult:
        """The whole exceedance answer of a deterministic method."""
        raise MethodError("method", f"{self.name} is not deterministic")

    def tail_bounds(self, portfolio: Portfolio, *, levels: Sequence[float],
                    layers: Sequence[Layer], losses: Sequence[float], seed: int) -> TailResult:
        """The whole risk-measure answer of a deterministic method."""
        raise MethodError("method", f"{self.name} is not deterministic")
