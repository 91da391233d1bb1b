"""Schemas of POST /v1/risk-measures: value-at-risk and tail value-at-risk of the portfolio
loss S at confidence levels, and its exceedance curve by return period (one sample set)."""

from __future__ import annotations

from typing import Annotated

from pydantic import BaseModel, Field, ValidationInfo, field_validator
from pydantic_core import PydanticCustomError

from service.schemas.common import ComputationOut, DiagnosticsOut, Money, PortfolioRequest
from service.schemas.credit import ContributionOut
from service.schemas.parameter_risk import ParameterIntervalOut

# 1 - 1/T must stay distinguishable from 1 in double precision (about 1e-16 apart).
RETURN_PERIOD_MAX = 1e12

Level = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=1)]
ReturnPeriod = Annotated[
    float, Field(strict=True, allow_inf_nan=False, gt=1, le=RETURN_PERIOD_MAX)
]


class RiskMeasuresRequest(PortfolioRequest):
    # Declared before `levels` so that the levels check can see them.
    return_periods: list[ReturnPeriod] = Field(
        default_factory=list,
        description="Return periods T in years (periods), 1 < T <= 10^12: each gets the loss "
        "exceeded on average once in T periods, i.e. the value-at-risk at level 1 - 1/T "
        "(the exceedance curve). Optional; the server caps how many one request may hold.",
    )
    losses: list[Money] = Field(
        default_factory=list,
        description="Loss amounts x in money units (|x| <= 10^18): each gets its exceedance "
        "probability P(S > x) and return period 1 / P(S > x) in years (the inverse of the "
        "curve). Optional; the server caps how many one request may hold.",
    )
    levels: list[Level] = Field(
        default_factory=list,
        validate_default=True,
        description="Confidence levels q, each strictly between 0 and 1 (0.995 is the 1-in-200 "
        "level of common solvency regimes): each gets VaR_q (the q-quantile of S) and TVaR_q "
        "(the mean of S beyond VaR_q). May be empty only when return_periods are given; the "
        "server caps how many one request may hold.",
    )

    @field_validator("levels")
    @classmethod
    def _something_to_compute(cls, levels: list[float], info: ValidationInfo) -> list[float]:
        if "return_periods" not in info.data:
            return levels  # return_periods were invalid and have their own error
        if not levels and not info.data["return_periods"]:
            raise PydanticCustomError(
                "too_short",
                "List should have at least 1 item after validation, not 0 (levels may be "
                "empty only when return_periods are given)",
            )
        return levels


class MeasureOut(BaseModel):
    """With method recursion every *_ci_low / *_ci_high is a rigorous lower / upper bound
    (claims rounded down / up), the headline figure lies between them and standard errors are
    null."""

    level: float = Field(description="Confidence level q, in (0, 1).")
    var: float | None = Field(
        description="Value-at-risk VaR_q: the q-quantile of the portfolio loss S, in money units."
    )
    var_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of VaR_q, in money units."
    )
    var_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of VaR_q, in money units."
    )
    tvar: float | None = Field(
        description="Tail value-at-risk TVaR_q = VaR_q + E[(S - VaR_q)+] / (1 - q): the mean "
        "loss in the worst 1 - q of periods, in money units; >= VaR_q."
    )
    tvar_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of TVaR_q, in money units."
    )
    tvar_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of TVaR_q, in money units."
    )
    tvar_std_error: float | None = Field(
        description="Standard error of TVaR_q in money units (delta method); null for "
        "recursion."
    )
    diagnostics: DiagnosticsOut = Field(
        description="How far the error bar of the exceedance estimate at VaR_q can be trusted."
    )
    var_with_parameters: ParameterIntervalOut | None = Field(
        default=None,
        description="With parameter_uncertainty on a line: the interval of VaR_q that also "
        "includes the parameter uncertainty, and which part dominates. Absent otherwise.",
    )
    tvar_with_parameters: ParameterIntervalOut | None = Field(
        default=None,
        description="With parameter_uncertainty on a line: the interval of TVaR_q that also "
        "includes the parameter uncertainty, and which part dominates. Absent otherwise.",
    )
    contributions: list[ContributionOut] = Field(
        default_factory=list,
        description="Euler allocation of TVaR_q to the lines of a dependent portfolio "
        "(E[S_i | S > VaR_q] from the same samples) or to the obligor groups; they sum to "
        "TVaR_q. Empty for independent claim lines.",
    )


class CurvePointOut(BaseModel):
    """With method recursion every *_ci_low / *_ci_high is a rigorous lower / upper bound
    (claims rounded down / up), the headline figure lies between them and standard errors are
    null."""

    return_period: float = Field(description="Return period T in years (periods), > 1.")
    probability: float = Field(description="Annual exceedance probability 1 / T.")
    loss: float | None = Field(
        description="Loss exceeded on average once in T periods (VaR at level 1 - 1/T), in "
        "money units."
    )
    loss_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of the loss, in money units."
    )
    loss_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of the loss, in money units."
    )
    diagnostics: DiagnosticsOut = Field(
        description="How far the error bar of the exceedance estimate at this loss can be "
        "trusted."
    )
    loss_with_parameters: ParameterIntervalOut | None = Field(
        default=None,
        description="With parameter_uncertainty on a line: the interval of the loss that also "
        "includes the parameter uncertainty, and which part dominates. Absent otherwise.",
    )


class LossReturnPeriodOut(BaseModel):
    """With method recursion every *_ci_low / *_ci_high is a rigorous lower / upper bound
    (claims rounded down / up), the headline figure lies between them and standard errors are
    null."""

    loss: float = Field(description="Loss amount x in money units.")
    probability: float | None = Field(
        description="Estimated exceedance probability P(S > x), in [0, 1]."
    )
    probability_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of P(S > x)."
    )
    probability_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of P(S > x); with no sample "
        "beyond x, a one-sided 95% upper bound."
    )
    std_error: float | None = Field(
        description="Standard error of P(S > x); null for recursion."
    )
    return_period: float | None = Field(
        description="Return period 1 / P(S > x) in years (periods); null when nothing beyond "
        "x was observed (the return period is then at least return_period_ci_low)."
    )
    return_period_ci_low: float | None = Field(
        description="Lower end of the 95% interval of the return period, 1 / probability_ci_high."
    )
    return_period_ci_high: float | None = Field(
        description="Upper end of the 95% interval of the return period, 1 / probability_ci_low; "
        "null when unbounded."
    )


class RiskMeasuresResponse(ComputationOut):
    samples: int = Field(description="Number of samples (simulated periods) behind the figures.")
    measures: list[MeasureOut] = Field(
        description="VaR and TVaR per requested level, in request order."
    )
    curve: list[CurvePointOut] = Field(
        description="Loss per requested return period, in request order (empty when none "
        "were asked for)."
    )
    loss_return_periods: list[LossReturnPeriodOut] = Field(
        description="Exceedance probability and return period per requested loss, in request "
        "order (empty when none were asked for)."
    )
    parameter_draws: int | None = Field(
        default=None, description="Parameter draws of the nested simulation (lines with "
        "parameter_uncertainty only).")
