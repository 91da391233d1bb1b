"""Schemas of POST /v1/ruin: ruin probabilities of the classical compound Poisson surplus
process R_t = u + c t - (claims paid up to t), at a list of capitals u, over a finite horizon or
for ever, and the capital for a target ruin probability."""

from __future__ import annotations

from typing import Annotated

from pydantic import BaseModel, Field, ValidationInfo, field_validator
from pydantic_core import PydanticCustomError

from service.schemas.common import (
    MAX_JSON_SAFE_INT,
    ClaimMean,
    DiagnosticsOut,
    NonNegativeMoney,
    PositiveMoney,
    PrecisionSpec,
    RequestModel,
    RuinMethod,
    Severity,
)

# theta far beyond any real book, but small enough that rho = 1 / (1 + theta) stays a normal
# double and every figure stays inside double precision.
LOADING_MAX = 1e6
# Claim rate x horizon is the mean number of claims on a path: keep it inside double precision
# (the server's max_expected_claims limits it much further).
HORIZON_MAX = 1e12

Loading = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=-1, le=LOADING_MAX)]
Probability = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=1)]

RUIN_METHOD_DESCRIPTION = (
    "Estimator: auto (from the claims' tails: Siegmund's algorithm for light tails, conditional "
    "Monte Carlo for heavy ones), crude (plain simulation), tilted (Siegmund's algorithm: "
    "exponential tilting by the adjustment coefficient; light tails), conditional "
    "(Asmussen-Kroese conditional Monte Carlo on the Pollaczek-Khinchine sum, or on the largest "
    "claim of the path with a horizon), conditional_is (conditional Monte Carlo over which "
    "ladder height is largest; infinite horizon), recursion (deterministic lower and upper "
    "bounds of the Pollaczek-Khinchine sum by the discretised recursion; infinite horizon only)."
)


class ProcessSpec(RequestModel):
    """The surplus process. Give the premium either as a safety loading or as a rate."""

    label: Annotated[str, Field(max_length=200)] | None = Field(
        default=None, description="Name of the book or line (free text, for the caller)."
    )
    claim_rate: ClaimMean = Field(
        description="lambda: expected number of claims per unit of time (0 < rate <= 10^9). The "
        "unit of time is the caller's (usually a year); horizon uses the same unit."
    )
    severity: Severity
    retention: PositiveMoney | None = Field(
        default=None,
        description="Per-claim retention of an excess-of-loss reinsurance in money units "
        "(0 < retention <= 10^18): the insurer pays min(X, retention) of each claim X and the "
        "reinsurer the rest. (A portfolio line's retention is a deductible instead: that line "
        "pays the excess.) Absent = the insurer pays every claim in full.",
    )
    # premium_rate is declared before loading so that the loading check can see it.
    premium_rate: PositiveMoney | None = Field(
        default=None,
        description="c: premium income per unit of time in money units (0 < c <= 10^18). Give "
        "exactly one of premium_rate and loading.",
    )
    loading: Loading | None = Field(
        default=None,
        validate_default=True,
        description="theta: safety loading, so that c = (1 + theta) lambda E[claim paid] (the "
        "paid claim is min(X, retention) with a retention); -1 < theta <= 10^6. A loading of "
        "0 or below fails the net profit condition: ruin is then certain. Give exactly one of "
        "loading and premium_rate.",
    )

    @field_validator("loading")
    @classmethod
    def _one_premium(cls, loading: float | None, info: ValidationInfo) -> float | None:
        if "premium_rate" not in info.data:
            return loading  # premium_rate was invalid and has its own error
        given = info.data["premium_rate"] is not None
        if loading is None and not given:
            raise PydanticCustomError(
                "missing", "Field required: give loading (theta) or premium_rate (c)"
            )
        if loading is not None and given:
            raise PydanticCustomError(
                "premium_conflict", "give either loading or premium_rate, not both"
            )
        return loading


class RuinRequest(RequestModel):
    process: ProcessSpec = Field(description="The surplus process: claims and premium.")
    capital: list[NonNegativeMoney] = Field(
        min_length=1,
        description="Initial capitals u in money units (0 .. 10^18), each getting its ruin "
        "probability psi(u) (psi(u, T) with a horizon). The server caps how many one request "
        "may hold.",
    )
    horizon: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0,
                                    le=HORIZON_MAX)] | None = Field(
        default=None,
        description="Finite horizon T in the claim rate's unit of time (0 < T <= 10^12): the "
        "probability of ruin by time T. Absent = infinite horizon (ruin ever).",
    )
    target_probability: Probability | None = Field(
        default=None,
        description="A target ruin probability in (0, 1), e.g. 0.001: the response then also "
        "gives the smallest capital whose ruin probability is at most the target "
        "(capital_for_target).",
    )
    method: RuinMethod = Field(default="auto", description=RUIN_METHOD_DESCRIPTION)
    precision: PrecisionSpec = Field(
        default_factory=PrecisionSpec,
        description="Precision target and budgets (samples are simulated paths); server limits "
        "apply to every budget. With recursion relative_error is the bounds' relative "
        "half-width to reach by refining the grid.",
    )
    seed: Annotated[int, Field(strict=True, ge=0, le=MAX_JSON_SAFE_INT)] | None = Field(
        default=None,
        description="Root seed of the random streams (0 .. 2^53-1); the same seed and request "
        "give the same figures. Drawn by the server and returned when absent.",
    )


class RuinEstimateOut(BaseModel):
    """With method recursion ci_low / ci_high are rigorous lower / upper bounds, probability
    lies between them, std_error is null and samples is 0."""

    capital: float = Field(description="Initial capital u in money units.")
    probability: float | None = Field(
        description="Estimated ruin probability psi(u) (psi(u, T) with a horizon), in [0, 1]."
    )
    std_error: float | None = Field(
        description="Standard error of the probability; null with no ruined path, for "
        "recursion, and for the exact answer."
    )
    relative_error: float | None = Field(
        description="std_error / probability (for recursion the bounds' half-width / "
        "probability); null when the probability is 0."
    )
    ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval (rigorous lower bound for "
        "recursion)."
    )
    ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval; with no ruined path, a one-sided "
        "95% upper bound (rigorous upper bound for recursion)."
    )
    samples: int = Field(description="Simulated paths behind this estimate (0 when exact or "
                                     "deterministic).")
    hits: int = Field(description="Paths with a non-zero contribution to the estimate.")
    diagnostics: DiagnosticsOut = Field(
        description="How far this estimate's own error bar can be trusted."
    )
    approximation: float | None = Field(
        description="The classical approximation at u, for comparison: Cramer-Lundberg "
        "C exp(-gamma u) for light tails, the subexponential asymptotic for heavy ones (with a "
        "horizon: one big jump, heavy tails only); null where there is none."
    )


class CapitalForTargetOut(BaseModel):
    target: float = Field(description="The target ruin probability asked for.")
    capital: float | None = Field(
        description="Smallest capital whose estimated ruin probability is at most the target; "
        "null when none was found."
    )
    ci_low: float | None = Field(
        description="Capital where the 95% band's lower edge reaches the target (for recursion: "
        "a capital whose ruin probability is surely above the target)."
    )
    ci_high: float | None = Field(
        description="Capital where the 95% band's upper edge reaches the target: it suffices "
        "with 95% confidence (for recursion: surely)."
    )


class RuinResponse(BaseModel):
    engine_version: str = Field(description="Version of the computation engine.")
    method: str = Field(
        description="Estimator actually used (see the request's method); exact when the net "
        "profit condition fails (ruin is certain)."
    )
    method_reason: str = Field(description="Why this estimator was used.")
    seed: int = Field(description="Root seed that reproduces these figures (0 .. 2^53-1).")
    elapsed_s: float | None = Field(description="Engine wall time in seconds.")
    stopped_by: str = Field(
        description="Budget that ended the computation: relative_error (target met), samples, "
        "max_samples, time_limit, or exact (no computation needed)."
    )
    warnings: list[str] = Field(description="Things the caller should know about these figures.")
    premium_rate: float | None = Field(
        description="c, the premium income per unit of time (from the loading when one was "
        "given)."
    )
    mean_claim: float | None = Field(
        description="E[claim paid]: the mean of min(X, retention), or of X without a retention."
    )
    horizon: float | None = Field(description="The horizon T; null = infinite.")
    adjustment_coefficient: float | None = Field(
        description="gamma, the adjustment (Lundberg) coefficient: psi(u) <= exp(-gamma u). "
        "Null for heavy tails (none exists) and when the net profit condition fails."
    )
    lundberg_constant: float | None = Field(
        description="C of the Cramer-Lundberg approximation psi(u) ~ C exp(-gamma u); null with "
        "adjustment_coefficient."
    )
    estimates: list[RuinEstimateOut] = Field(
        description="One estimate per requested capital, in request order."
    )
    capital_for_target: CapitalForTargetOut | None = Field(
        description="The capital for target_probability; null when no target was asked for."
    )
