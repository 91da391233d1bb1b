"""Typed errors raised by the core.

Hierarchy::

    TailgaugeError
    ├── ParameterError   a model or request argument is invalid (names the argument)
    ├── MethodError      the requested method cannot be applied to this model
    └── LimitError       the request would exceed a compute or memory limit

The service maps every one of them to an HTTP 422 in one place.

Where an error points is ``loc``, a tuple of names and list positions (``("lines", 0,
"severity", "sigma")``). It may be given as that tuple or, as most raise sites do, as the
dotted text ``"lines[0].severity.sigma"``, which is split once here; ``parameter`` is that
text (or the dotted text of a tuple ``loc``), for messages.
"""

from __future__ import annotations

from collections.abc import Sequence

Loc = tuple[str | int, ...]


def _split(parameter: str) -> Loc:
    """'lines[0].severity.sigma' (or 'thresholds.3') -> ('lines', 0, 'severity', 'sigma')."""
    loc: list[str | int] = []
    for part in parameter.replace("[", ".").replace("]", "").split("."):
        if part:
            loc.append(int(part) if part.isdigit() else part)
    return tuple(loc)


def dotted(loc: Loc) -> str:
    """('lines', 0, 'severity') -> 'lines[0].severity'."""
    text = ""
    for part in loc:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else part)
    return text


class TailgaugeError(Exception):
    """Base class of every error the core raises on purpose."""

    def __init__(self, parameter: str | Sequence[str | int], message: str) -> None:
        self.loc: Loc = _split(parameter) if isinstance(parameter, str) else tuple(parameter)
        self.parameter = parameter if isinstance(parameter, str) else dotted(self.loc)
        self.message = message
        super().__init__(f"{self.parameter}: {message}")

    def __reduce__(self) -> tuple[type, tuple[Loc, str]]:
        # Two constructor arguments: tell pickle so errors cross process boundaries.
        return (type(self), (self.loc, self.message))


class ParameterError(TailgaugeError, ValueError):
    """An argument is out of its domain; `parameter` names it (dotted path allowed)."""


class MethodError(TailgaugeError):
    """The chosen estimator does not apply to the model (e.g. tilting a heavy tail)."""


class LimitError(TailgaugeError):
    """The request would exceed a compute or memory limit; `parameter` names the limit."""
