"""Schemas of POST /v1/layers: expected losses of aggregate layers of the portfolio loss S."""

from __future__ import annotations

from pydantic import BaseModel, Field

from service.schemas.common import (
    ComputationOut,
    DiagnosticsOut,
    NonNegativeMoney,
    PortfolioRequest,
    PositiveMoney,
    RequestModel,
)
from service.schemas.parameter_risk import ParameterIntervalOut


class LayerSpec(RequestModel):
    attachment: NonNegativeMoney = Field(
        description="Attachment point a of the aggregate layer in money units (0 .. 10^18): "
        "the layer pays min(max(S - a, 0), limit) of the period's portfolio loss S."
    )
    limit: PositiveMoney | None = Field(
        default=None,
        description="Limit (width) of the layer in money units (0 < limit <= 10^18); null or "
        "absent = unlimited (a stop-loss cover above the attachment).",
    )


class LayersRequest(PortfolioRequest):
    layers: list[LayerSpec] = Field(
        min_length=1,
        description="Aggregate layers, each estimated from the same samples (so adjacent "
        "layers add up exactly). The server caps how many one request may hold.",
    )


class LayerOut(BaseModel):
    """With method recursion every *_ci_low / *_ci_high is a rigorous lower / upper bound
    (claims rounded down / up), the headline figure lies between them and standard errors are
    null."""

    attachment: float = Field(description="Attachment point a in money units.")
    limit: float | None = Field(description="Limit in money units; null = unlimited.")
    expected_loss: float | None = Field(
        description="Expected loss to the layer per period, E[min(max(S - a, 0), limit)], in "
        "money units."
    )
    expected_loss_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of the expected loss."
    )
    expected_loss_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of the expected loss; null when "
        "nothing reached an unlimited layer (no finite bound can be read off the samples)."
    )
    expected_loss_std_error: float | None = Field(
        description="Standard error of the expected loss in money units; null for "
        "recursion."
    )
    probability_attach: float | None = Field(
        description="Probability that the layer is hit in a period, P(S > a)."
    )
    probability_attach_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of probability_attach."
    )
    probability_attach_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of probability_attach; with no "
        "sample beyond a, a one-sided 95% upper bound."
    )
    probability_exhaust: float | None = Field(
        description="Probability that the layer is used up in a period, P(S > a + limit); null "
        "for an unlimited layer."
    )
    probability_exhaust_ci_low: float | None = Field(
        description="Lower end of the 95% confidence interval of probability_exhaust; null for "
        "an unlimited layer."
    )
    probability_exhaust_ci_high: float | None = Field(
        description="Upper end of the 95% confidence interval of probability_exhaust (one-sided "
        "bound with no sample beyond a + limit); null for an unlimited layer."
    )
    diagnostics: DiagnosticsOut = Field(
        description="How far the error bar of the layer's expected loss can be trusted."
    )
    expected_loss_with_parameters: ParameterIntervalOut | None = Field(
        default=None,
        description="With parameter_uncertainty on a line: the interval of the expected "
        "loss that also "
        "includes the parameter uncertainty, and which part dominates. Absent otherwise.",
    )


class LayersResponse(ComputationOut):
    samples: int = Field(description="Number of samples (simulated periods) behind the figures.")
    layers: list[LayerOut] = Field(description="One result per requested layer, in request order.")
    parameter_draws: int | None = Field(
        default=None, description="Parameter draws of the nested simulation (lines with "
        "parameter_uncertainty only).")
