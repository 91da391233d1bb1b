"""Typed errors raised by the core.

Hierarchy::

    TailgaugeError
    ├── ParameterError   a model or request argument is invalid (names the argument)
    ├── MethodError      the requested method cannot be applied to this model
    └── LimitError       the request would exceed a compute or memory limit

The service maps every one of them to an HTTP 422 in one place.
"""

from __future__ import annotations


class TailgaugeError(Exception):
    """Base class of every error the core raises on purpose."""

    def __init__(self, parameter: str, message: str) -> None:
        super().__init__(f"{parameter}: {message}")
        self.parameter = parameter
        self.message = message

    def __reduce__(self) -> tuple[type, tuple[str, str]]:
        # Two constructor arguments: tell pickle so errors cross process boundaries.
        return (type(self), (self.parameter, self.message))


class ParameterError(TailgaugeError, ValueError):
    """An argument is out of its domain; `parameter` names it (dotted path allowed)."""


class MethodError(TailgaugeError):
    """The chosen estimator does not apply to the model (e.g. tilting a heavy tail)."""


class LimitError(TailgaugeError):
    """The request would exceed a compute or memory limit; `parameter` names the limit."""
