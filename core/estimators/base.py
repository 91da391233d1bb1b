"""What every estimator hands the precision loop: groups of thresholds sharing one sample set."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

# block_values(m, rng) -> per-sample contributions, shape (m, len(indices))
BlockFn = Callable[[int, np.random.Generator], np.ndarray]


@dataclass(frozen=True)
class Group:
    """Thresholds (by position in the request) estimated from one stream of samples.

    work: deterministic cost proxy of one sample (claims drawn plus tail evaluations), used to
    compare estimators without wall-clock noise so that the automatic choice reproduces.
    """

    indices: tuple[int, ...]
    block_values: BlockFn
    work: float
    detail: str = ""


def work_per_sample(expected_claims: float, evaluations: int) -> float:
    # A tail evaluation (logsf) costs about as much as drawing a few claims.
    return max(1.0, expected_claims) + 4.0 * evaluations
