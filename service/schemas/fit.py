"""Schemas of POST /v1/fit: severity and count laws fitted to loss data, with goodness of fit,
tail diagnostics and the ready JSON of a portfolio line's severity and count."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, Field, model_validator

from service.schemas.common import (
    MAX_JSON_SAFE_INT,
    Money,
    NonNegativeMoney,
    PositiveMoney,
    RequestModel,
)

FamilyName = Literal[
    "lognormal", "gamma", "weibull", "exponential", "pareto", "generalized_pareto", "normal",
    "spliced_lognormal", "spliced_gamma",
]
MAX_CLAIMS = 100_000
MAX_PERIODS = 10_000


class BootstrapSpec(RequestModel):
    replicates: Annotated[int, Field(strict=True, ge=1, le=999)] = Field(
        default=49, description="Parametric-bootstrap replicates behind each p-value (1 .. "
        "999); each replicate is a refit, so the cost grows with it. p-values are multiples "
        "of 1 / (replicates + 1).")
    max_claims: Annotated[int, Field(strict=True, ge=20, le=10_000)] = Field(
        default=500, description="Claims per replicate (20 .. 10,000): with more claims than "
        "this the replicates have this many and the n-scaled statistics are compared.")


class FitRequest(RequestModel):
    claims: list[Money] = Field(
        min_length=1, max_length=MAX_CLAIMS,
        description="Claim amounts in money units, one per claim (|x| <= 10^18). A claim "
        "capped at its policy limit is given at the limit, with the limit in censored_at.")
    reporting_threshold: NonNegativeMoney | None = Field(
        default=None, description="Amount below which claims are not reported (left "
        "truncation); every claim must be at or above it. Absent: every claim is reported.")
    censored_at: list[PositiveMoney | None] | None = Field(
        default=None, description="Policy limit per claim (null where none): a claim equal "
        "to its limit is right-censored (the loss was at least the limit); a claim above it "
        "is an error.")
    families: list[FamilyName] | None = Field(
        default=None, min_length=1, description="Families to fit; absent: every family that "
        "applies (normal only when some claim is <= 0). spliced_lognormal / spliced_gamma: a "
        "lognormal / gamma body below tail_threshold and a generalized Pareto tail above.")
    tail_threshold: PositiveMoney | None = Field(
        default=None, description="Splice point of the spliced families; absent: the "
        "empirical 90% quantile of the claims (at least 10 claims above it).")
    counts: list[Annotated[int, Field(strict=True, ge=0, le=10**9)]] | None = Field(
        default=None, max_length=MAX_PERIODS,
        description="Number of claims per period (at least 2 periods), for the count fits.")
    exposures: list[Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=1e18)]
                    ] | None = Field(
        default=None, max_length=MAX_PERIODS,
        description="Exposure of each period of counts (> 0); the count mean is rate x "
        "exposure. The ready count law is for the last period's exposure.")
    bootstrap: BootstrapSpec = Field(
        default_factory=BootstrapSpec,
        description="Size of the parametric bootstrap behind the goodness-of-fit p-values.")
    seed: Annotated[int, Field(strict=True, ge=0, le=MAX_JSON_SAFE_INT)] | None = Field(
        default=None, description="Root seed of the bootstrap streams (0 .. 2^53-1); drawn "
        "and returned when absent.")

    @model_validator(mode="after")
    def _lengths(self) -> FitRequest:
        if self.censored_at is not None and len(self.censored_at) != len(self.claims):
            raise ValueError(f"censored_at has {len(self.censored_at)} entries but claims has "
                             f"{len(self.claims)}: give one limit (or null) per claim")
        if self.exposures is not None and (
                self.counts is None or len(self.exposures) != len(self.counts)):
            raise ValueError("exposures need counts, one exposure per period of counts")
        return self


class TestOut(BaseModel):
    statistic: float = Field(description="The statistic on the data.")
    p_value: float = Field(description="Parametric-bootstrap p-value (fitting accounted for).")


class TestsOut(BaseModel):
    ks: TestOut = Field(description="Kolmogorov-Smirnov distance D.")
    cvm: TestOut = Field(description="Cramer-von Mises W^2.")
    ad: TestOut = Field(description="Anderson-Darling A^2.")
    replicates: int = Field(description="Bootstrap replicates behind the p-values.")


class QQPointOut(BaseModel):
    empirical: float = Field(description="An uncensored claim amount.")
    fitted: float = Field(description="The fitted law's quantile (above the reporting "
                          "threshold) at that claim's plotting position.")


class UncertaintyOut(BaseModel):
    covariance: list[list[float]] = Field(
        description="Covariance of the severity's parameters, in the order of parameters.")
    draws: int = Field(description="Parameter draws of the nested simulation.")


class SeverityFitOut(BaseModel):
    family: str = Field(description="Family fitted.")
    parameters: dict[str, float] = Field(description="Maximum-likelihood estimates.")
    std_errors: dict[str, float | None] = Field(
        description="Standard errors from the observed information (null when it is not "
        "positive definite).")
    covariance: list[list[float]] | None = Field(
        description="Covariance of the estimates (inverse observed information), rows and "
        "columns in the order of parameters.")
    log_likelihood: float = Field(
        description="Maximised log-likelihood (truncation and censoring included).")
    aic: float = Field(description="2 k - 2 log L.")
    bic: float = Field(description="k log n - 2 log L.")
    tests: TestsOut = Field(description="Goodness-of-fit statistics with bootstrap p-values.")
    qq: list[QQPointOut] = Field(description="Up to 100 points for a QQ plot.")
    severity: dict[str, Any] | None = Field(
        description="The fitted law as a portfolio line's severity JSON; null when a "
        "parameter is outside the ranges a line accepts (see warnings).")
    parameter_uncertainty: UncertaintyOut | None = Field(
        description="The ready parameter_uncertainty of a portfolio line with this severity.")
    tail_threshold: float | None = Field(description="Splice point (spliced families only).")
    notes: list[str] = Field(
        description="Remarks on this fit (boundary optimum, bootstrap sizes, ranges).")


class TailPointOut(BaseModel):
    threshold: float = Field(description="Threshold u in money units.")
    exceedances: int = Field(description="Claims above u.")
    value: float = Field(description="The diagnostic at u.")
    ci_low: float | None = Field(
        description="Lower end of its 95% interval (null when unavailable).")
    ci_high: float | None = Field(
        description="Upper end of its 95% interval (null when unavailable).")


class TailOut(BaseModel):
    mean_excess: list[TailPointOut] = Field(description="Mean excess E[X - u | X > u] by u.")
    gpd_shape: list[TailPointOut] = Field(
        description="Generalized Pareto shape xi of the excesses over u, with 95% Wald "
        "interval.")
    hill: list[TailPointOut] = Field(
        description="Hill estimates of xi = 1/alpha from the k largest claims (exceedances = "
        "k, threshold = the (k+1)-th largest claim).")
    hill_k: int | None = Field(description="The k of the headline Hill estimate, round(sqrt(n)).")
    hill_xi: float | None = Field(description="Hill estimate at k = round(sqrt(n)).")
    hill_ci_low: float | None = Field(description="Lower end of the 95% interval of hill_xi.")
    hill_ci_high: float | None = Field(description="Upper end of the 95% interval of hill_xi.")
    notes: list[str] = Field(description="Caveats of the diagnostics (e.g. censoring).")


class CountFitOut(BaseModel):
    family: str = Field(description="poisson or negative_binomial.")
    parameters: dict[str, float] = Field(
        description="rate: claims per unit of exposure; size: negative binomial r.")
    std_errors: dict[str, float | None] = Field(
        description="Standard errors (observed information; closed form for the Poisson rate).")
    covariance: list[list[float]] | None = Field(
        description="Covariance of the estimates, in the order of parameters.")
    log_likelihood: float = Field(description="Maximised log-likelihood of the counts.")
    aic: float = Field(description="2 k - 2 log L.")
    bic: float = Field(description="k log T - 2 log L (T periods).")
    count: dict[str, Any] = Field(
        description="The fitted law for one period of the last period's exposure, as a "
        "portfolio line's count JSON.")


class DispersionOut(BaseModel):
    statistic: float = Field(description="Index of dispersion sum (n - m e)^2 / (m e).")
    df: int = Field(description="Degrees of freedom, periods - 1.")
    p_value: float = Field(description="chi-square upper tail: small means over-dispersed.")


class FitResponse(BaseModel):
    engine_version: str = Field(description="Version of the computation engine.")
    seed: int = Field(description="Root seed of the bootstrap streams (0 .. 2^53-1).")
    elapsed_s: float | None = Field(description="Engine wall time in seconds.")
    claims: int = Field(description="Number of claims fitted.")
    censored: int = Field(description="Number of claims at their limit (right-censored).")
    warnings: list[str] = Field(
        description="Things the caller should know (families not fitted, count notes).")
    fits: list[SeverityFitOut] = Field(description="One per fitted family, by AIC (best "
                                       "first).")
    tail: TailOut = Field(description="Diagnostics for the choice of a tail threshold.")
    count_fits: list[CountFitOut] = Field(
        description="Poisson and negative binomial fits (empty without counts).")
    dispersion: DispersionOut | None = Field(
        description="Index-of-dispersion test of the Poisson (null without counts).")
