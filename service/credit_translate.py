"""Schema -> core for lines of obligors (the credit half of service/translate.py)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from core.credit import BetaLGD, CreditModel, FixedLGD, ObligorGroup
from core.credit.lines import FactorLine
from core.errors import MethodError, ParameterError, TailgaugeError
from core.portfolio import Line
from service.schemas.common import LineSpec, PortfolioSpec
from service.schemas.credit import CreditLineSpec


def has_obligors(spec: PortfolioSpec) -> bool:
    return any(isinstance(line, CreditLineSpec) for line in spec.lines)


def credit_model(spec: PortfolioSpec, claim_line: Callable[[LineSpec, int], Line]
                 ) -> CreditModel:
    """The CreditModel of a portfolio with lines of obligors; its claim lines (converted by
    `claim_line`) load on the same factors (factor_loadings), one dependence model."""
    if spec.factors is None:
        raise ParameterError("portfolio.factors", "lines of obligors need the systematic "
                             "factors {count, correlation?}")
    if spec.dependence is not None and spec.dependence.correlation is not None:
        raise ParameterError(("portfolio", "dependence", "correlation"),
                             "a book with lines of obligors takes its dependence from "
                             "portfolio.factors (claim lines load on them through "
                             "factor_loadings); leave the line correlation out")
    groups: list[ObligorGroup] = []
    paths: list[str] = []
    claims: list[FactorLine] = []
    claim_paths: list[tuple[str | int, ...]] = []
    for i, line in enumerate(spec.lines):
        if not isinstance(line, CreditLineSpec):
            if line.factor_loadings is None:
                raise ParameterError(("portfolio", "lines", i, "factor_loadings"),
                                     "is required for a claim line in a book with lines of "
                                     f"obligors: one loading per factor ({spec.factors.count})")
            if line.parameter_uncertainty is not None:
                raise MethodError(("portfolio", "lines", i, "parameter_uncertainty"),
                                  "is not supported in a book with lines of obligors")
            loc = ("portfolio", "lines", i)
            try:
                claims.append(FactorLine(line=claim_line(line, i),
                                         factor_loadings=tuple(line.factor_loadings)))
            except TailgaugeError as exc:
                raise type(exc)((*loc, *exc.loc), exc.message) from exc
            claim_paths.append(loc)
            continue
        for j, g in enumerate(line.obligors):
            path = f"portfolio.lines[{i}].obligors[{j}]"
            lgd_spec = g.loss_given_default
            try:
                lgd = (FixedLGD(lgd_spec) if isinstance(lgd_spec, float)
                       else BetaLGD(lgd_spec.mean, lgd_spec.sd))
                groups.append(ObligorGroup(
                    count=g.count, exposure=g.exposure,
                    default_probability=g.default_probability, loss_given_default=lgd,
                    factor_loadings=tuple(g.factor_loadings), label=_label(line, i, j, g.label)))
            except TailgaugeError as exc:
                raise type(exc)(f"{path}.{exc.parameter}", exc.message) from exc
            paths.append(path)
    dep = spec.dependence
    corr = None if spec.factors.correlation is None else np.asarray(spec.factors.correlation)
    try:
        return CreditModel(groups=tuple(groups), lines=tuple(claims),
                           factors=spec.factors.count, correlation=corr,
                           copula=dep.copula if dep else "gaussian",
                           df=dep.df if dep else None)
    except TailgaugeError as exc:
        if exc.loc[:1] == ("lines",) and len(exc.loc) > 1:
            where = claim_paths[int(exc.loc[1])]
            raise type(exc)((*where, *exc.loc[2:]), exc.message) from exc
        raise type(exc)(_where(exc.parameter, paths), exc.message) from exc


def _label(line: CreditLineSpec, i: int, j: int, own: str | None) -> str:
    if own:
        return own
    base = line.label or f"line {i}"
    return base if len(line.obligors) == 1 else f"{base} group {j}"


def _where(parameter: str, paths: list[str]) -> str:
    """A CreditModel parameter (groups.g.x, correlation, df) as a request path."""
    if parameter.startswith("groups."):
        _, g, *rest = parameter.split(".")
        return ".".join([paths[int(g)], *rest])
    if parameter == "correlation" or parameter.startswith("correlation."):
        return f"portfolio.factors.{parameter}"
    if parameter in ("copula", "df"):
        return f"portfolio.dependence.{parameter}"
    return f"portfolio.{parameter}"
