"""Schemas of POST /v1/exceedance: P(S > x) for each threshold x."""

from __future__ import annotations

from pydantic import BaseModel, Field

from service.schemas.common import ComputationOut, DiagnosticsOut, Money, PortfolioRequest
from service.schemas.parameter_risk import ParameterIntervalOut


class ExceedanceRequest(PortfolioRequest):
    thresholds: list[Money] = Field(
        min_length=1,
        description="Loss thresholds x in money units (|x| <= 10^18); each gets an estimate of the "
        "exceedance probability P(S > x). The server caps how many one request may hold.",
    )


class ExceedanceEstimateOut(BaseModel):
    threshold: float = Field(description="Loss threshold x in money units.")
    probability: float | None = Field(
        description="Estimated exceedance probability P(S > x), in [0, 1]."
    )
    std_error: float | None = Field(
        description="Standard error of the probability; null for the deterministic method."
    )
    relative_error: float | None = Field(
        description="std_error / probability; null when the probability is 0 or deterministic."
    )
    ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval (rigorous lower bound for "
        "recursion)."
    )
    ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval; with no hits, a one-sided upper "
        "bound (rigorous upper bound for recursion)."
    )
    samples: int = Field(description="Number of samples behind this estimate.")
    hits: int = Field(description="Samples with a non-zero contribution to the estimate.")
    diagnostics: DiagnosticsOut = Field(
        description="How far this estimate's own error bar can be trusted."
    )
    probability_with_parameters: ParameterIntervalOut | None = Field(
        default=None,
        description="With parameter_uncertainty on a line: the interval of the probability "
        "that also "
        "includes the parameter uncertainty, and which part dominates. Absent otherwise.",
    )


class ExceedanceResponse(ComputationOut):
    estimates: list[ExceedanceEstimateOut] = Field(
        description="One estimate per requested threshold, in request order."
    )
    parameter_draws: int | None = Field(
        default=None, description="Parameter draws of the nested simulation (lines with "
        "parameter_uncertainty only).")
