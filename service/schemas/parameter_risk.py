"""The parameter-risk interval a figure carries when a line has parameter_uncertainty."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field


class ParameterIntervalOut(BaseModel):
    ci_low: float | None = Field(
        description="Lower end of the 95% interval that includes both the sampling error and "
        "the parameter uncertainty (the two half-widths added in quadrature).")
    ci_high: float | None = Field(description="Upper end of that interval.")
    parameter_ci_low: float | None = Field(
        description="2.5% point of the figure over the parameter draws.")
    parameter_ci_high: float | None = Field(
        description="97.5% point of the figure over the parameter draws.")
    parameter_std_dev: float | None = Field(
        description="Standard deviation of the figure over the parameter draws.")
    dominant: Literal["parameter", "sampling"] = Field(
        description="Which part of the uncertainty is wider.")
    draws: int = Field(description="Parameter draws behind the interval.")
