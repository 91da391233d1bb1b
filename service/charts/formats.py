"""What a chart request names and how figures are labelled, without matplotlib.

The service imports this at start; matplotlib (0.7 s of a server's start) is imported only
when a chart is first drawn (service.charts.catalogue).
"""

from __future__ import annotations

import math
from typing import Literal

ImageFormat = Literal["svg", "png"]
MEDIA_TYPES: dict[ImageFormat, str] = {"svg": "image/svg+xml", "png": "image/png"}


def money(value: float, _: object = None) -> str:
    """12500000 -> '12.5M': short money labels in the caller's unit."""
    if not math.isfinite(value):
        return ""
    size = abs(value)
    for scale, suffix in ((1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k")):
        if size >= scale:
            return f"{value / scale:.3g}{suffix}"
    return f"{value:.3g}"


def probability(value: float, _: object = None) -> str:
    """Plain tick labels for probabilities (no mathtext: it is slow and needs no TeX look)."""
    if not math.isfinite(value) or value <= 0:
        return ""
    return f"{value:g}" if value >= 1e-4 else f"{value:.0e}".replace("e-0", "e-")


def count(value: float, _: object = None) -> str:
    """Tick labels for return periods and other plain magnitudes: 1,000 and 1e+06."""
    if not math.isfinite(value) or value <= 0:
        return ""
    return f"{value:,.0f}" if 1 <= value < 1e6 else f"{value:.0e}".replace("e+0", "e")


def percent(level: float) -> str:
    """0.995 -> '99.5%'."""
    return f"{100 * level:.6g}%"


def return_period(probability: float) -> str:
    """0.005 -> '1 in 200'."""
    return f"1 in {1 / probability:,.4g}" if probability > 0 else "never observed"
