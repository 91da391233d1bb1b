"""Mean-shift importance sampling on the copula's normals: its registry entry."""

from __future__ import annotations

from core.estimators.dependent_only import DependentOnly


class MeanShift(DependentOnly):
    """Importance sampling on the copula's normals: a defensive mixture of mean shifts toward
    the design points (cross-entropy adapted for copula-coupled lines)."""

    name = "mean_shift"
    listing = 80
    what = "dependent portfolios"

    def dependent_rank(self, amounts: int | None, *, measures: bool) -> int | None:
        if amounts is None:
            return 0
        # One design point per piece of the failure region: with more amounts than two, a
        # mixture aimed at the single best design point can miss the other amounts' regions
        # while its pilot looks precise (seen 8% low on a 20-amount one-factor book), so auto
        # keeps to the estimators that cover every piece.
        return 3 if amounts <= 2 else None


ESTIMATOR = MeanShift()
