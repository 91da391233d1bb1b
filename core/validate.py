"""Argument checks shared by the model objects; each error names the argument."""

from __future__ import annotations

import math
import numbers

from core.errors import ParameterError


def real(name: str, value: object) -> float:
    """A finite real number (bools refused: True is not a claim size)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ParameterError(name, f"must be a real number, got {value!r}")
    out = float(value)
    if not math.isfinite(out):
        raise ParameterError(name, f"must be finite, got {out!r}")
    return out


def positive(name: str, value: object) -> float:
    out = real(name, value)
    if not out > 0:
        raise ParameterError(name, f"must be > 0, got {out!r}")
    return out


def integer(name: str, value: object, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ParameterError(name, f"must be an integer >= {minimum}, got {value!r}")
    as_float = float(value)
    if not math.isfinite(as_float) or as_float != int(as_float) or as_float < minimum:
        raise ParameterError(name, f"must be an integer >= {minimum}, got {value!r}")
    return int(as_float)
