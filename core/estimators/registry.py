"""The estimator registry: every module of core.estimators that defines `ESTIMATOR` (an
Estimator, core.estimators.estimator) is a method. Exceedance, risk measures, layers, ruin and
the service's method list all read it, so adding an estimator is one new module (and its tests).
"""

from __future__ import annotations

import functools
import importlib
import pkgutil
from pathlib import Path

from core.errors import MethodError, ParameterError
from core.estimators.estimator import Estimator, ModelKind
from core.portfolio import Portfolio

AUTO = "auto"  # the automatic choice: not an estimator, it pilots the candidates


@functools.cache
def estimators() -> tuple[Estimator, ...]:
    """Every registered estimator, in listing order."""
    found: list[Estimator] = []
    here = str(Path(__file__).resolve().parent)
    for info in sorted(pkgutil.iter_modules([here]), key=lambda i: i.name):
        module = importlib.import_module(f"core.estimators.{info.name}")
        est = getattr(module, "ESTIMATOR", None)
        if isinstance(est, Estimator):
            found.append(est)
    names = [e.name for e in found]
    if len(set(names)) != len(names) or AUTO in names:
        raise RuntimeError(f"estimator names must be unique and not {AUTO!r}: {names}")
    return tuple(sorted(found, key=lambda e: e.listing))


def names() -> tuple[str, ...]:
    return tuple(e.name for e in estimators())


def methods() -> tuple[str, ...]:
    """What a request may ask for: auto, then every estimator."""
    return (AUTO, *names())


def serving(kind: ModelKind) -> tuple[str, ...]:
    """The methods that serve a kind of model, in listing order."""
    return tuple(e.name for e in estimators() if kind in e.serves)


def get_for(kind: ModelKind, name: str, what: str) -> Estimator:
    """The estimator `name`, refused at `method` unless it serves this kind of model (`what`
    names the model in the message)."""
    est = get(name)
    if kind not in est.serves:
        raise MethodError("method", f"{name} does not apply to {what}; use one of "
                                    f"{', '.join((AUTO, *serving(kind)))}")
    return est


def model_itself() -> str:
    """The method that draws from the model itself (no proposal, crude Monte Carlo)."""
    return next(e.name for e in estimators() if not e.proposal)


def ruin_methods() -> tuple[str, ...]:
    return (AUTO, *(e.name for e in estimators() if e.ruin_infinite or e.ruin_finite))


def get(name: str) -> Estimator:
    for est in estimators():
        if est.name == name:
            return est
    raise ParameterError("method", f"must be one of {', '.join(methods())}; got {name!r}")


def candidates(portfolio: Portfolio) -> list[str]:
    """The automatic choice's candidates for this model, best guess first."""
    ranked = [(rank, est.listing, est.name) for est in estimators()
              if (rank := est.candidate_rank(portfolio)) is not None]
    return [name for _, _, name in sorted(ranked)]
