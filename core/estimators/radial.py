"""Kortschak and Hashorva (2013) for correlated lognormal amounts: its registry entry."""

from __future__ import annotations

from core.estimators.dependent_only import DependentOnly
from core.estimators.estimator import AmountSampler


class Radial(DependentOnly):
    """Kortschak and Hashorva (2013) conditional Monte Carlo along rays, for correlated
    lognormal amounts; exceedance only."""

    name = "radial"
    listing = 70
    one_sample_set = True
    amount_sampler = AmountSampler.RADIAL
    copula_lines = False
    what = "dependent portfolios of correlated lognormal amounts"

    def dependent_rank(self, amounts: int | None, *, measures: bool) -> int | None:
        return 2 if amounts is not None and not measures else None


ESTIMATOR = Radial()
