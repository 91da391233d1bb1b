"""Random streams: every random number of a request comes from one named stream.

Block b of a stream draws from SeedSequence(seed, spawn_key=(purpose, method, *group, b)):

- purpose: what the numbers are for (an estimate's samples, a pilot, an adaptation round, ruin
  paths), a `Purpose`;
- method: the estimator that draws them, by name (its id is a CRC-32 of the name, so a new
  estimator gets a stream of its own without a central table, and a fallback never reuses the
  first method's draws);
- group: which sample set of the request (a threshold's group, an anchor, a capital search
  round and tilt set); its length is fixed per purpose, so two keys never run together;
- b: the block, so the same seed gives the same answer however the work is split
  (core.sampling.blocks; the block size depends on the model only).

Structured keys replace integer arithmetic on stream ids (the numpy.random advice: spawn
children, never seed + i).
"""

from __future__ import annotations

import zlib
from dataclasses import dataclass
from enum import IntEnum

import numpy as np


class Purpose(IntEnum):
    """What a stream's random numbers are for."""

    SAMPLES = 0  # an exceedance estimate's sample set
    PILOT = 1  # a candidate's pilot in the automatic choice
    ADAPT = 2  # a cross-entropy round of an adapted proposal (block = round)
    MEASURE_SAMPLES = 3  # the sample set of risk measures and layers
    MEASURE_PILOT = 4  # the pilot placing the risk-measure grid
    MEASURE_ADAPT = 5  # adapted mixture components of risk measures (block = round)
    RUIN_PATHS = 6  # surplus paths (Siegmund, finite horizon tilted or crude)
    RUIN_JUMPS = 7  # the finite-horizon conditional estimator's paths
    EULER = 8  # the sample set of per-line TVaR contributions (Euler allocation)


def method_id(name: str) -> int:
    """The stream id of an estimator: a CRC-32 of its name (stable across runs and machines)."""
    return zlib.crc32(name.encode("utf-8"))


@dataclass(frozen=True)
class Stream:
    """One named stream of a request; `rng(seed, block)` gives the generator of a block."""

    purpose: Purpose
    method: str
    group: tuple[int, ...] = (0,)

    def key(self, block: int) -> tuple[int, ...]:
        return (int(self.purpose), method_id(self.method), *self.group, int(block))

    def rng(self, seed: int, block: int) -> np.random.Generator:
        return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=self.key(block)))
