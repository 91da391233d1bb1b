"""Per-sample contributions shared by the estimators' risk-measure hooks
(core.estimators.estimator.Estimator.contributions).

A block's contributions are an (m, 2 G) array: the first G columns are exceedance contributions
at the G points, the last G stop-loss contributions. Their means are unbiased for P(S > a_g) and
E[(S - a_g)+]; both are monotone in a sample by sample, so one sample set serves every level and
layer.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from core.sampling import Draw


def plain_values(draw: Draw, a: np.ndarray) -> np.ndarray:
    """Weighted indicator and excess of the whole sum: crude draws, or any proposal whose draw
    carries its exact likelihood ratio."""
    lr = np.exp(draw.log_lr)[:, None]
    over = draw.total[:, None] - a[None, :]
    return np.hstack([(over > 0) * lr, np.maximum(over, 0.0) * lr])


MAX_COMPONENTS = 3


def spread_out(anchors: Sequence[float]) -> list[float]:
    """At most MAX_COMPONENTS anchors (the extremes and the middle): mixture components
    adapted at neighbouring points overlap, and each costs a pilot."""
    points = sorted(set(float(a) for a in anchors))
    if len(points) <= MAX_COMPONENTS:
        return points
    picks = np.linspace(0, len(points) - 1, MAX_COMPONENTS).round().astype(int)
    return [points[i] for i in picks]
