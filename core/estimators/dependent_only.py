"""The base of the estimators that serve only dependent portfolios (copula-coupled lines,
correlated lognormal amounts; radial.py, mean_shift.py): they refuse other models. Their
samplers live in core.dependence (coupled.py, shift.py, radial.py), whose dispatcher
(engine.py) reads their attributes."""

from __future__ import annotations

from core.errors import MethodError
from core.estimators.estimator import Estimator, ModelKind
from core.portfolio import Portfolio


class DependentOnly(Estimator):
    serves = frozenset({ModelKind.DEPENDENT})
    what: str = ""

    def check(self, portfolio: Portfolio) -> None:
        if getattr(portfolio, "dependence", None) is None:
            raise MethodError("method", f"{self.name} applies to {self.what} "
                                        "(portfolio.dependence); use auto or crude")
