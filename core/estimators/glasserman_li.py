"""Glasserman and Li (2005) two-step importance sampling for obligor groups: its entry in the
registry. The proposals (factor mean shift, conditional twist, W shape under the t copula) and
the sampler live in core.credit (shift.py, draws.py, estimators.py), which dispatch on the
attributes here."""

from __future__ import annotations

from core.errors import MethodError
from core.estimators.estimator import Estimator, ModelKind
from core.portfolio import Portfolio


class GlassermanLi(Estimator):
    name = "glasserman_li"
    listing = 60
    serves = frozenset({ModelKind.CREDIT})

    def check(self, portfolio: Portfolio) -> None:
        if isinstance(portfolio, Portfolio):  # claim lines only (a CreditModel is not one)
            raise MethodError("method", "glasserman_li applies to portfolios with lines of "
                                        "obligors (portfolio.factors); use auto or crude")


ESTIMATOR = GlassermanLi()
