"""Plain result records returned by the core (no maths here)."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True, kw_only=True)
class Diagnostics:
    """How far an estimate's own error bar can be trusted.

    pareto_k: Pareto tail shape k-hat of the largest per-sample contributions (PSIS diagnostic);
        None when too few non-zero contributions exist to fit it.
    effective_samples: Kish effective sample size (sum w)^2 / sum w^2 of the contributions.
    largest_share: the largest single contribution over the total.
    batch_ratio: spread of batch estimates over independent sub-streams divided by the
        spread the reported standard error predicts (about 1 when healthy).
    exact: the figure is known in closed form (a certainty, or a term the model fixes): its
        interval has zero width because there is no error, not because none was seen.
    """

    pareto_k: float | None
    effective_samples: float
    largest_share: float | None
    batch_ratio: float | None
    reliable: bool
    reason: str
    exact: bool = False

    @classmethod
    def deterministic(cls, reason: str, *, exact: bool = False) -> Diagnostics:
        """The record of a figure that was not sampled: rigorous bounds, or (exact) a closed
        form."""
        return cls(pareto_k=None, effective_samples=0.0, largest_share=None, batch_ratio=None,
                   reliable=True, reason=reason, exact=exact)

    @classmethod
    def on_grid(cls, cells: int) -> Diagnostics:
        """Deterministic bounds from the recursion on a grid of `cells` cells."""
        return cls.deterministic(f"deterministic bounds on a grid of {cells} cells")


@dataclass(frozen=True, kw_only=True)
class Estimate:
    """A Monte Carlo (or deterministic) estimate of one probability or expectation."""

    value: float
    std_error: float | None
    relative_error: float | None
    ci_low: float
    ci_high: float
    samples: int
    hits: int
    diagnostics: Diagnostics


@dataclass(frozen=True, kw_only=True)
class ExceedanceEstimate(Estimate):
    threshold: float
    method: str = ""

    @property
    def probability(self) -> float:
        return self.value


@dataclass(frozen=True, kw_only=True)
class ExceedanceResult:
    method: str
    method_reason: str
    seed: int
    elapsed_s: float
    stopped_by: str
    mean: float
    std_dev: float
    estimates: list[ExceedanceEstimate]
    warnings: list[str] = field(default_factory=list)


@dataclass(frozen=True, kw_only=True)
class RuinEstimate(Estimate):
    """The ruin probability at one capital u (psi(u), or psi(u, T) with a horizon).

    approximation: the classical approximation at u beside the estimate: Cramer-Lundberg
    C exp(-gamma u) for light tails, the subexponential asymptotic for heavy ones (None where
    there is none).
    """

    capital: float
    approximation: float | None = None
    method: str = ""

    @property
    def probability(self) -> float:
        return self.value


@dataclass(frozen=True, kw_only=True)
class CapitalForTarget:
    """The smallest capital whose ruin probability is at most `target`, with the capitals where
    the 95% band's lower and upper edges reach the target (None where no capital was found)."""

    target: float
    capital: float | None
    ci_low: float | None
    ci_high: float | None


@dataclass(frozen=True, kw_only=True)
class RuinResult:
    method: str
    method_reason: str
    seed: int
    elapsed_s: float
    stopped_by: str
    premium_rate: float
    horizon: float | None
    adjustment_coefficient: float | None
    lundberg_constant: float | None
    estimates: list[RuinEstimate]
    capital_for_target: CapitalForTarget | None = None
    warnings: list[str] = field(default_factory=list)


@dataclass(frozen=True, kw_only=True)
class Interval:
    """A figure with its 95% interval (std_error None where it is not a mean of samples)."""

    value: float
    ci_low: float
    ci_high: float
    std_error: float | None = None


@dataclass(frozen=True, kw_only=True)
class Contribution:
    """A line's Euler allocation of TVaR, E[S_i | S > VaR], scaled so the lines sum to TVaR."""

    label: str
    tvar_contribution: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True, kw_only=True)
class MeasureEstimate:
    """VaR and TVaR at one level (with per-line TVaR contributions where computed)."""

    level: float
    var: Interval
    tvar: Interval
    diagnostics: Diagnostics
    contributions: list[Contribution] = field(default_factory=list)


@dataclass(frozen=True, kw_only=True)
class LayerEstimate:
    """An aggregate layer's expected loss and its attachment and exhaustion probabilities."""

    attachment: float
    limit: float | None
    expected_loss: Interval
    probability_attach: Interval
    probability_exhaust: Interval | None
    diagnostics: Diagnostics


@dataclass(frozen=True, kw_only=True)
class TailResult:
    """Risk measures, layers and loss exceedance from one sample set (or recursion bounds)."""

    method: str
    method_reason: str
    seed: int
    elapsed_s: float
    stopped_by: str
    samples: int
    mean: float
    std_dev: float
    measures: list[MeasureEstimate] = field(default_factory=list)
    layers: list[LayerEstimate] = field(default_factory=list)
    loss_exceedance: list[Interval] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
