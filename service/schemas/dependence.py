"""Request schema of portfolio.dependence, shared by claim lines (a copula with a correlation
matrix between the lines) and obligor lines (the copula of the factor model, whose correlation
is portfolio.factors.correlation). The matrix rules (square, one row per line, symmetric, unit
diagonal, entries in [-1, 1], positive semi-definite) are checked once, in
core.dependence.copula, whose errors name the row and column."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Correlation = Annotated[float, Field(allow_inf_nan=False)]


class DependenceSpec(BaseModel):
    model_config = ConfigDict(extra="forbid")  # as every request model: typos are errors

    copula: Literal["gaussian", "student_t"] = Field(
        default="gaussian",
        description="gaussian or student_t copula; student_t divides every latent normal by the "
        "common sqrt(W / df), W chi-square(df). Claim lines keep their own compound laws as "
        "marginals.",
    )
    correlation: list[list[Correlation]] | None = Field(
        default=None,
        description="Claim lines: the copula's correlation matrix, one row and column per line "
        "in line order (symmetric, unit diagonal, entries in [-1, 1], positive "
        "semi-definite). Obligor lines take theirs from portfolio.factors.",
    )
    df: Annotated[float, Field(strict=True, allow_inf_nan=False, gt=0, le=1e6)] | None = Field(
        default=None,
        description="Degrees of freedom of the student_t copula (> 0; required there, refused "
        "for gaussian).",
    )

    @model_validator(mode="after")
    def _df_for_t(self) -> DependenceSpec:
        if self.copula == "student_t" and self.df is None:
            raise ValueError("a student_t copula needs df")
        return self
