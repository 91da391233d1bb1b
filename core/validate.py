"""Argument checks shared by the model objects; each error names the argument."""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from typing import ClassVar

import numpy as np

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


def finite_numbers(name: str, values: Sequence[float] | np.ndarray, *,
                   minimum: float | None = None) -> np.ndarray:
    """A non-empty list of finite numbers (each >= minimum when given), as a float array; an
    error names the first bad entry (`name.i`)."""
    try:
        x = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise ParameterError(name, "must be a non-empty list of numbers") from None
    if x.ndim != 1 or x.size == 0:
        raise ParameterError(name, "must be a non-empty list of numbers")
    for i, v in enumerate(x):
        if minimum is None and not math.isfinite(v):
            raise ParameterError(f"{name}.{i}", "must be a finite number")
        if minimum is not None and not (math.isfinite(v) and v >= minimum):
            raise ParameterError(f"{name}.{i}", f"must be a finite number >= {minimum:g}, "
                                 f"got {float(v)!r}")
    return x


class ByFields:
    """Value semantics from the class's `_fields`: repr, equality and hashing by parameters
    (for laws that cannot be dataclasses, e.g. whose parameter clashes with a property)."""

    _fields: ClassVar[tuple[str, ...]]

    def _values(self) -> tuple[float, ...]:
        return tuple(getattr(self, name) for name in self._fields)

    def __repr__(self) -> str:
        args = ", ".join(f"{n}={v!r}" for n, v in zip(self._fields, self._values(), strict=True))
        return f"{type(self).__name__}({args})"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ByFields) and type(other) is type(self) and (
            self._values() == other._values())

    def __hash__(self) -> int:
        return hash((type(self).__name__, self._values()))
