"""Number formats of the report: money with thousands separators, probabilities with four
significant digits, and an en dash for what is missing."""

from __future__ import annotations

import math
from typing import Any

MISSING = "\u2013"


def _finite(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    return float(value) if math.isfinite(value) else None


def amount(value: Any) -> str:
    """Money in the caller's unit: 1,500,000 or 0.25."""
    v = _finite(value)
    if v is None:
        return MISSING
    return f"{v:,.0f}" if abs(v) >= 100 else f"{v:.4g}"


def number(value: Any) -> str:
    v = _finite(value)
    if v is None:
        return MISSING
    if v == int(v) and abs(v) < 1e15:
        return f"{int(v):,}"
    return f"{v:.4g}"


def probability(value: Any) -> str:
    v = _finite(value)
    return MISSING if v is None else f"{v:.4g}"


def interval(low: Any, high: Any, fmt: Any = probability) -> str:
    if _finite(low) is None and _finite(high) is None:
        return MISSING
    return f"{fmt(low)} \u2013 {fmt(high)}"


def years(probability_value: Any) -> str:
    """Return period 1 / p in years (periods); missing for p = 0."""
    v = _finite(probability_value)
    if v is None or v <= 0:
        return MISSING
    return f"1 in {1 / v:,.4g}"


def percent(value: Any) -> str:
    v = _finite(value)
    return MISSING if v is None else f"{100 * v:.4g}%"


def seconds(value: Any) -> str:
    v = _finite(value)
    return MISSING if v is None else f"{v:.2f} s"
