"""The 95% intervals every estimate reports, built in one place.

- A mean of samples: estimate +- Z95 standard errors, clipped to what the figure can be.
- A count of hits (crude Monte Carlo): the exact Clopper-Pearson interval.
- Nothing observed (no sample reached the event): the one-sided 95% bound of the exact binomial
  test, P <= 1 - 0.05^(1/n) (the Clopper-Pearson upper bound for zero hits; about 3/n, the rule
  of three), times the largest value one contribution can take on the event (1 for an
  indicator). Exceedance, risk measures, layers and ruin all use this one rule, so a figure
  with no hits has the same bound whichever endpoint reports it.
"""

from __future__ import annotations

import math

from scipy.stats import beta

Z95 = 1.959963984540054  # the 97.5% quantile of the standard normal law
NO_HIT_LEVEL = 0.05


def no_hit_upper(samples: int, largest: float = 1.0) -> float:
    """One-sided 95% upper bound on a mean of `samples` contributions none of which hit, each
    at most `largest` on the event: largest * (1 - 0.05^(1/n))."""
    return largest * -math.expm1(math.log(NO_HIT_LEVEL) / samples)


def normal(value: float, se: float, *, lower: float = 0.0, upper: float = math.inf
           ) -> tuple[float, float]:
    """value +- Z95 se, clipped to [lower, upper]."""
    return max(lower, value - Z95 * se), min(upper, value + Z95 * se)


def clopper_pearson(hits: int, samples: int) -> tuple[float, float]:
    """The exact two-sided 95% interval of a binomial proportion, honest even for few hits."""
    low = float(beta.ppf(0.025, hits, samples - hits + 1)) if hits > 0 else 0.0
    high = float(beta.ppf(0.975, hits + 1, samples - hits)) if hits < samples else 1.0
    return low, high
