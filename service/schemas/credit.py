"""Schemas of credit portfolios: lines of obligor groups, the systematic factors, the copula.

A portfolio line is either a line of claims (LineSpec) or `{label?, obligors: group |
[group...]}`; LineSpec hands a body with `obligors` to CreditLineSpec (so a claim line's
error paths stay as they were). The factors are `portfolio.factors`; the copula is
`portfolio.dependence.copula` (gaussian when absent).
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, Field, field_validator, model_validator

from service.schemas.common import COUNT_MAX, Finite, PositiveMoney, RequestModel

MAX_FACTORS = 50

Probability = Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=1)]


class BetaLgdSpec(RequestModel):
    family: Literal["beta"] = Field(description="Beta law of the loss given default.")
    mean: Probability = Field(description="Mean loss given default, in (0, 1).")
    sd: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, lt=0.5)] = Field(
        description="Standard deviation; below sqrt(mean (1 - mean)) for a beta law.")

    @model_validator(mode="after")
    def _is_beta(self) -> BetaLgdSpec:
        if not self.sd**2 < self.mean * (1 - self.mean):
            raise ValueError(f"sd must be below sqrt(mean (1 - mean)) = "
                             f"{(self.mean * (1 - self.mean)) ** 0.5:.4g} for a beta law")
        return self


class ObligorGroupSpec(RequestModel):
    label: Annotated[str, Field(max_length=200)] | None = Field(
        default=None, description="Name of the group (free text, for the caller).")
    count: Annotated[int, Field(strict=True, ge=1, le=COUNT_MAX)] = Field(
        description="Number of alike obligors in the group (1 .. 10^9; the server caps the "
        "total, max_obligors).")
    exposure: PositiveMoney = Field(
        description="Exposure at default of each obligor, in money units (> 0).")
    default_probability: Probability = Field(
        description="Each obligor's probability of default over the period, in (0, 1).")
    loss_given_default: (
        Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=1)] | BetaLgdSpec
    ) = Field(description="Share of the exposure lost on default: a number in (0, 1], or a "
              "beta law {family: beta, mean, sd} drawn per default.")
    factor_loadings: list[Finite] = Field(
        max_length=MAX_FACTORS,
        description="Loadings b on the portfolio's factors (one per factor): an obligor "
        "defaults when b . Z + sqrt(1 - b' R b) e < Phi^{-1}(PD); b' R b < 1.")


class CreditLineSpec(RequestModel):
    label: Annotated[str, Field(max_length=200)] | None = Field(
        default=None, description="Name of the line (free text, for the caller).")
    obligors: list[ObligorGroupSpec] = Field(
        min_length=1, description="One homogeneous group of obligors, or a list of them.")

    @field_validator("obligors", mode="before")
    @classmethod
    def _one_or_many(cls, value: Any) -> Any:
        # A single group is a list of one (error paths then always carry the group index).
        return [value] if isinstance(value, dict) else value


class FactorsSpec(RequestModel):
    count: Annotated[int, Field(strict=True, ge=1, le=MAX_FACTORS)] = Field(
        description="Number k of systematic factors (standard normal).")
    correlation: list[list[Finite]] | None = Field(
        default=None, description="k x k correlation matrix of the factors (positive "
        "definite); absent = independent factors.")


class ContributionOut(BaseModel):
    label: str = Field(description="The obligor group (its label, else 'line i group j').")
    tvar_contribution: float | None = Field(
        description="Euler contribution to TVaR (E[L_g | L > VaR] for a loss without atoms); "
        "the contributions sum to TVaR.")
    ci_low: float | None = Field(description="Lower end of the approximate 95% interval.")
    ci_high: float | None = Field(description="Upper end of the approximate 95% interval.")
