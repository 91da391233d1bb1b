"""Schema -> core for lines of obligors (the credit half of service/translate.py)."""

from __future__ import annotations

import numpy as np

from core.credit import BetaLGD, CreditModel, FixedLGD, ObligorGroup
from core.errors import MethodError, ParameterError, TailgaugeError
from service.schemas.common import PortfolioSpec
from service.schemas.credit import CreditLineSpec


def has_obligors(spec: PortfolioSpec) -> bool:
    return any(isinstance(line, CreditLineSpec) for line in spec.lines)


def credit_model(spec: PortfolioSpec) -> CreditModel:
    """The CreditModel of a portfolio whose lines are all lines of obligors."""
    for i, line in enumerate(spec.lines):
        if not isinstance(line, CreditLineSpec):
            raise MethodError(f"portfolio.lines[{i}]", "a portfolio mixing claim lines with "
                              "lines of obligors is not supported yet; send them separately")
    if spec.factors is None:
        raise ParameterError("portfolio.factors", "lines of obligors need the systematic "
                             "factors {count, correlation?}")
    groups: list[ObligorGroup] = []
    paths: list[str] = []
    for i, line in enumerate(spec.lines):
        assert isinstance(line, CreditLineSpec)
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
        return CreditModel(groups=tuple(groups), factors=spec.factors.count, correlation=corr,
                           copula=dep.copula if dep else "gaussian",
                           df=dep.df if dep else None)
    except TailgaugeError as exc:
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
