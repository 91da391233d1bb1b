"""Request schema of the dependence between lines (portfolio.dependence) and the Euler
contributions of the risk-measures response. The matrix rules (square, one row per line,
symmetric, unit diagonal, entries in [-1, 1], positive semi-definite, df rules) are checked
once, in core.dependence.copula, whose errors name the row and column."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

Correlation = Annotated[float, Field(allow_inf_nan=False)]


class DependenceSpec(BaseModel):
    model_config = ConfigDict(extra="forbid")  # as every request model: typos are errors

    copula: Literal["gaussian", "student_t"] = Field(
        description="How the lines' period losses are coupled: gaussian or student_t copula "
        "(each line keeps its own compound law as marginal)."
    )
    correlation: list[list[Correlation]] = Field(
        min_length=1,
        description="Correlation matrix of the copula: one row and column per line, in line "
        "order; symmetric, unit diagonal, entries in [-1, 1], positive semi-definite.",
    )
    df: Annotated[float, Field(allow_inf_nan=False, gt=0)] | None = Field(
        default=None,
        description="Degrees of freedom of the student_t copula (> 0; required there, refused "
        "for gaussian).",
    )


class ContributionOut(BaseModel):
    label: str = Field(description="The line's label (or 'line i').")
    tvar_contribution: float = Field(
        description="Euler allocation E[S_i | S > VaR_q] of TVaR_q to this line, in money units; "
        "the lines add up to TVaR_q."
    )
    ci_low: float = Field(description="Lower end of a conservative 95% interval.")
    ci_high: float = Field(description="Upper end of a conservative 95% interval.")
