"""Schemas shared by every resource: numbers, the portfolio model, precision, diagnostics.

Numbers are strict (a string such as "1.5" is refused, not coerced) and finite (NaN and
Infinity literals are refused). Money amounts are in one currency unit of the caller's
choosing; thresholds, retentions, limits and severity scales must all use the same unit.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

import core

# JavaScript clients hold integers exactly only up to 2**53 - 1; seeds stay inside that range.
MAX_JSON_SAFE_INT = 2**53 - 1
# Fewer samples than this give no usable error bar; the engine refuses them too.
MIN_SAMPLES = 100

# Hard ranges that keep every model inside double precision (means, variances and tilts of
# the engine must not overflow). They are far beyond any real portfolio.
MONEY_MAX = 1e18
COUNT_MAX = 10**9

Finite = Annotated[float, Field(strict=True, allow_inf_nan=False)]
Positive = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0)]
Money = Annotated[float, Field(strict=True, allow_inf_nan=False, ge=-MONEY_MAX, le=MONEY_MAX)]
PositiveMoney = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=MONEY_MAX)]
NonNegativeMoney = Annotated[float, Field(strict=True, allow_inf_nan=False, ge=0, le=MONEY_MAX)]
ClaimMean = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=COUNT_MAX)]


class RequestModel(BaseModel):
    """Base of request models: unknown keys are errors, so typos are caught."""

    model_config = ConfigDict(extra="forbid")


# --- claim-count distributions (tag: kind) -------------------------------------------------


class FixedCount(RequestModel):
    kind: Literal["fixed"] = Field(description="A fixed number of claims per period.")
    n: Annotated[int, Field(strict=True, ge=0, le=COUNT_MAX)] = Field(
        description="Number of claims in every period (integer, 0 .. 10^9)."
    )


class PoissonCount(RequestModel):
    kind: Literal["poisson"] = Field(description="Poisson number of claims per period.")
    mean: ClaimMean = Field(description="Expected number of claims per period (0 < mean <= 10^9).")


class NegativeBinomialCount(RequestModel):
    kind: Literal["negative_binomial"] = Field(
        description="Negative binomial number of claims per period (over-dispersed Poisson)."
    )
    mean: ClaimMean = Field(description="Expected number of claims per period (0 < mean <= 10^9).")
    dispersion: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=1, le=1e6)] = Field(
        description="Variance-to-mean ratio of the claim count (1 < dispersion <= 10^6; 1 "
        "would be Poisson)."
    )


class BinomialCount(RequestModel):
    kind: Literal["binomial"] = Field(
        description="Binomial number of claims per period (e.g. a fixed set of risks)."
    )
    trials: Annotated[int, Field(strict=True, ge=1, le=COUNT_MAX)] = Field(
        description="Number of independent risks that can each claim once (integer, 1 .. 10^9)."
    )
    probability: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=1)] = Field(
        description="Probability that a risk claims in the period, in (0, 1]."
    )


ClaimCount = Annotated[
    FixedCount | PoissonCount | NegativeBinomialCount | BinomialCount,
    Field(discriminator="kind", description="Claim-count distribution per period, by kind."),
]


# --- claim-severity distributions (tag: family) --------------------------------------------


class LognormalSeverity(RequestModel):
    family: Literal["lognormal"] = Field(description="Lognormal claim size: log X ~ N(mu, sigma).")
    mu: Annotated[float, Field(strict=True, allow_inf_nan=False, ge=-50, le=50)] = Field(
        description="Mean of log claim size (log money units, -50 .. 50)."
    )
    sigma: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=10)] = Field(
        description="Standard deviation of log claim size (0 < sigma <= 10)."
    )


class ParetoSeverity(RequestModel):
    family: Literal["pareto"] = Field(
        description="Pareto (Lomax) claim size with survival (1 + x/scale)^-alpha, x > 0."
    )
    alpha: Annotated[float, Field(strict=True, allow_inf_nan=False, ge=0.01, le=1000)] = Field(
        description="Tail index (0.01 .. 1000); the mean is finite only above 1, the variance "
        "only above 2."
    )
    scale: PositiveMoney = Field(description="Scale in money units (0 < scale <= 10^18).")


class WeibullSeverity(RequestModel):
    family: Literal["weibull"] = Field(
        description="Weibull claim size with survival exp(-(x/scale)^shape)."
    )
    shape: Annotated[float, Field(strict=True, allow_inf_nan=False, ge=0.01, le=100)] = Field(
        description="Shape (0.01 .. 100); below 1 the tail is heavier than exponential."
    )
    scale: PositiveMoney = Field(description="Scale in money units (0 < scale <= 10^18).")


class GammaSeverity(RequestModel):
    family: Literal["gamma"] = Field(description="Gamma claim size; mean = shape * scale.")
    shape: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=1e6)] = Field(
        description="Shape (0 < shape <= 10^6)."
    )
    scale: PositiveMoney = Field(description="Scale in money units (0 < scale <= 10^18).")


class ExponentialSeverity(RequestModel):
    family: Literal["exponential"] = Field(description="Exponential claim size.")
    mean: PositiveMoney = Field(description="Mean claim size in money units (0 < mean <= 10^18).")


class NormalSeverity(RequestModel):
    family: Literal["normal"] = Field(
        description="Normal claim size (can be negative: for net amounts such as P&L)."
    )
    mean: Money = Field(description="Mean claim size in money units (|mean| <= 10^18).")
    sd: PositiveMoney = Field(description="Standard deviation in money units (0 < sd <= 10^18).")


class GeneralizedParetoSeverity(RequestModel):
    family: Literal["generalized_pareto"] = Field(
        description="Generalized Pareto claim size with survival (1 + xi*x/scale)^(-1/xi); "
        "exponential at xi = 0, bounded by scale/(-xi) when xi < 0."
    )
    xi: Annotated[float, Field(strict=True, allow_inf_nan=False, ge=-10, le=10)] = Field(
        description="Shape (tail index, -10 .. 10); above 0 heavy-tailed, the mean is finite "
        "only below 1."
    )
    scale: PositiveMoney = Field(description="Scale in money units (0 < scale <= 10^18).")


class SplicedTail(RequestModel):
    xi: Annotated[float, Field(strict=True, allow_inf_nan=False, ge=-10, le=10)] = Field(
        description="Generalized Pareto shape of the excess over the threshold.")
    scale: PositiveMoney = Field(description="Generalized Pareto scale in money units.")


class SplicedSeverity(RequestModel):
    family: Literal["spliced"] = Field(
        description="A body law below a threshold and a generalized Pareto tail above it "
        "(as /v1/fit returns it): density w f_body(x) / F_body(threshold) at or below the "
        "threshold, (1 - w) g(x - threshold) above."
    )
    threshold: PositiveMoney = Field(description="Splice point in money units.")
    body_weight: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=1)] = Field(
        description="Probability w that a claim is at or below the threshold.")
    body: Annotated[LognormalSeverity | GammaSeverity, Field(discriminator="family")] = Field(
        description="Body law (lognormal or gamma), truncated to the threshold.")
    tail: SplicedTail = Field(description="Generalized Pareto law of the excess over the "
                              "threshold.")


Severity = Annotated[
    LognormalSeverity
    | ParetoSeverity
    | WeibullSeverity
    | GammaSeverity
    | ExponentialSeverity
    | NormalSeverity
    | GeneralizedParetoSeverity
    | SplicedSeverity,
    Field(discriminator="family", description="Claim-size distribution, by family."),
]


def severity_upper_end(severity: Severity) -> float | None:
    """Right end of the claim-size support, or None when unbounded."""
    if isinstance(severity, GeneralizedParetoSeverity) and severity.xi < 0:
        return severity.scale / -severity.xi
    if isinstance(severity, SplicedSeverity) and severity.tail.xi < 0:
        return severity.threshold + severity.tail.scale / -severity.tail.xi
    return None


# --- portfolio ------------------------------------------------------------------------------


class ParameterUncertaintySpec(RequestModel):
    covariance: list[list[Annotated[float, Field(strict=True, allow_inf_nan=False)]]] = Field(
        min_length=1, max_length=8,
        description="Covariance matrix of the severity's parameters, rows and columns in the "
        "order of the severity's fields after family (e.g. mu, sigma; for spliced: the body's "
        "two, body_weight, tail xi, tail scale), as /v1/fit returns it. Symmetric, positive "
        "semi-definite.",
    )
    draws: Annotated[int, Field(strict=True, ge=20, le=1000)] = Field(
        default=100,
        description="Parameter draws of the nested simulation (20 .. 1000); each costs one "
        "run of the request's figures.",
    )


class LineSpec(RequestModel):
    label: Annotated[str, Field(max_length=200)] | None = Field(
        default=None, description="Name of the line of business (free text, for the caller)."
    )
    count: ClaimCount
    severity: Severity
    retention: NonNegativeMoney | None = Field(
        default=None,
        description="Per-claim retention (deductible) in money units (0 .. 10^18): each claim "
        "pays "
        "min(max(X - retention, 0), limit). Absent = no layer below: claims are paid as "
        "drawn (so a normal claim may be negative); 0 floors claims at zero.",
    )
    limit: PositiveMoney | None = Field(
        default=None,
        description="Per-claim limit in money units (0 < limit <= 10^18); null = unlimited.",
    )
    factor_loadings: list[Finite] | None = Field(
        default=None, max_length=50,
        description="In a book with lines of obligors: the line's loadings b on "
        "portfolio.factors (one per factor, b' R b < 1); its latent variable is Y = b . Z + "
        "sqrt(1 - b' R b) e and its period loss F^{-1}(Phi(-Y)) with its own compound law F: "
        "like an obligor's, the latent variable is adverse when low, so loadings of the same "
        "sign make claims and defaults rise together. One dependence model for the mixed "
        "book. Required there; refused elsewhere.",
    )
    parameter_uncertainty: ParameterUncertaintySpec | None = Field(
        default=None,
        description="Uncertainty of the severity's parameters (e.g. from /v1/fit): the "
        "figures then also carry an interval that includes it, from a nested simulation "
        "over parameter draws. Absent: the parameters are taken as known.",
    )

    @model_validator(mode="wrap")
    @classmethod
    def _obligor_line(cls, data: Any, handler: Any) -> Any:
        # A line of obligors ({label?, obligors}) is a CreditLineSpec; delegating here keeps
        # a claim line's error paths free of union-member names.
        if isinstance(data, dict) and "obligors" in data:
            from service.schemas.credit import CreditLineSpec

            return CreditLineSpec.model_validate(data)
        return handler(data)

    @model_validator(mode="after")
    def _layer_can_pay(self) -> LineSpec:
        # A retention at or above the largest possible claim makes the line pay nothing,
        # which is almost surely a units mistake rather than an intended model.
        if not isinstance(self, LineSpec):  # a line of obligors, validated on its own
            return self
        top = severity_upper_end(self.severity)
        if top is not None and self.retention is not None and self.retention >= top:
            raise ValueError(
                f"retention {self.retention:g} is at or above the largest possible claim "
                f"{top:g} (scale / -xi), so the line can never pay"
            )
        return self


class PortfolioSpec(RequestModel):
    lines: list[LineSpec] = Field(
        min_length=1,
        description="Lines of business (independent unless `dependence` is given); the "
        "portfolio loss S is the sum of their per-period aggregate losses. A line may instead "
        "be a line of obligors {label?, obligors: group | [group...]} (see "
        "service/schemas/credit.py) on portfolio.factors; claim lines beside them load on the "
        "same factors (factor_loadings).",
    )
    factors: FactorsSpec | None = Field(
        default=None, description="Systematic factors of the obligor groups.")
    dependence: DependenceSpec | None = Field(
        default=None, description="Copula coupling the lines' period losses (claim lines: "
        "correlation required; absent = independent), or the copula of the obligors' factor "
        "model (gaussian when absent).")


# --- method and precision -------------------------------------------------------------------

# The methods are the core's estimator registry (core.estimators.registry): a new estimator
# appears in the schema without an edit here. Portfolio requests take every method (each
# refuses, at `method`, the models it does not serve); ruin takes those with a ruin regime.
# Type checkers see a plain str.
if TYPE_CHECKING:
    Method = str
    PortfolioMethod = str
    RuinMethod = str
else:
    Method = Literal[core.METHODS]
    PortfolioMethod = Method
    RuinMethod = Literal[core.RUIN_METHODS]

METHOD_DESCRIPTION = (
    "Estimator: auto (chosen from the model's tails and a short pilot), crude (plain Monte "
    "Carlo), tilted (exponential tilting, light tails), conditional (Asmussen-Kroese "
    "conditional Monte Carlo, heavy tails), conditional_is (conditional Monte Carlo over which "
    "claim is largest), recursion (deterministic discretised recursion with lower and upper "
    "bounds), glasserman_li (two-step importance sampling of Glasserman and Li 2005, for "
    "obligor groups); for a dependent portfolio also mean_shift (importance sampling on the "
    "copula's normals) and radial (Kortschak-Hashorva, correlated lognormal amounts; "
    "exceedance only)."
)


class PrecisionSpec(RequestModel):
    relative_error: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=1)] | None = (
        Field(
            default=None,
            description="Target relative error (standard error / estimate) of every estimate, "
            "in (0, 1); sampling continues until it is met or a budget is spent. Given "
            "without max_samples it means 'as precise as possible': the server's own budgets "
            "apply, with a warning when they stop the run.",
        )
    )
    samples: Annotated[int, Field(strict=True, ge=MIN_SAMPLES)] | None = Field(
        default=None,
        description="Number of simulated periods (samples) to draw (>= 100): exactly this "
        "many, or the minimum before checking relative_error when that is also given. Absent: "
        "the engine's default.",
    )
    max_samples: Annotated[int, Field(strict=True, ge=MIN_SAMPLES)] | None = Field(
        default=None,
        description="Largest number of samples per sample set while chasing relative_error "
        "(>= 100; >= samples). Ignored without relative_error.",
    )
    time_limit_s: Positive | None = Field(
        default=None, description="Wall-time budget of the computation in seconds (> 0)."
    )

    @model_validator(mode="after")
    def _budgets_agree(self) -> PrecisionSpec:
        if (
            self.samples is not None
            and self.max_samples is not None
            and self.max_samples < self.samples
        ):
            raise ValueError(
                f"max_samples ({self.max_samples}) must be at least samples ({self.samples})"
            )
        return self

    @property
    def as_precise_as_possible(self) -> bool:
        """The caller set a precision target but no sample budget of its own."""
        return self.relative_error is not None and self.max_samples is None


class PortfolioRequest(RequestModel):
    """Fields shared by every request that computes figures of a portfolio's loss S."""

    portfolio: PortfolioSpec = Field(description="The portfolio loss model: its lines.")
    method: PortfolioMethod = Field(default="auto", description=METHOD_DESCRIPTION)
    precision: PrecisionSpec = Field(
        default_factory=PrecisionSpec,
        description="Precision target and budgets; server limits apply to every budget.",
    )
    seed: Annotated[int, Field(strict=True, ge=0, le=MAX_JSON_SAFE_INT)] | None = Field(
        default=None,
        description="Root seed of the random streams (0 .. 2^53-1); the same seed and request "
        "give the same figures. Drawn by the server and returned when absent.",
    )


# --- response parts -------------------------------------------------------------------------


class DiagnosticsOut(BaseModel):
    pareto_k: float | None = Field(
        description="Pareto shape k-hat fitted to the largest per-sample contributions; above "
        "about 0.7 the standard error is not trustworthy. Null when too few contributions."
    )
    effective_samples: float | None = Field(
        description="Kish effective sample size (sum w)^2 / sum w^2 of the contributions."
    )
    largest_share: float | None = Field(
        description="Share of the estimate carried by the single largest contribution, in [0, 1]."
    )
    batch_ratio: float | None = Field(
        description="Spread of independent batch estimates over the spread the standard error "
        "predicts; about 1 when healthy."
    )
    reliable: bool = Field(description="Whether the error bar of this estimate can be trusted.")
    reason: str = Field(description="Why the estimate is (or is not) considered reliable.")
    exact: bool = Field(
        default=False,
        description="True only for a figure known in closed form (a certainty, or a term the "
        "model fixes); a Monte Carlo figure is never exact, even when its interval is narrow.",
    )


class ComputationOut(BaseModel):
    """Fields shared by every computed response."""

    engine_version: str = Field(description="Version of the computation engine.")
    method: str = Field(description="Estimator actually used (see the request's method).")
    method_reason: str = Field(description="Why this estimator was used.")
    seed: int = Field(description="Root seed that reproduces these figures (0 .. 2^53-1).")
    elapsed_s: float | None = Field(description="Engine wall time in seconds.")
    stopped_by: str = Field(
        description="Budget that ended sampling: relative_error (target met), samples, "
        "max_samples or time_limit."
    )
    mean: float | None = Field(
        description="Exact mean of the portfolio loss S in money units; null when infinite."
    )
    std_dev: float | None = Field(
        description="Exact standard deviation of S in money units; null when infinite "
        "(e.g. a Pareto line with alpha <= 2) or not known to full accuracy (claim lines "
        "loading on the credit factors of a mixed book)."
    )
    warnings: list[str] = Field(description="Things the caller should know about these figures.")


from service.schemas.credit import FactorsSpec  # noqa: E402
from service.schemas.dependence import DependenceSpec  # noqa: E402

PortfolioSpec.model_rebuild()
