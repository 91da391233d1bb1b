"""The one request pipeline every computing resource plugs into, for HTTP and batch runs.

    limits -> translate -> seed and budget -> engine (in the pool) -> errors -> metrics -> response

A resource (``Resource``) brings its own request and response schemas and three functions:
``check`` (its server limits), ``translate`` (request -> one engine call on core objects) and
``respond`` (engine result -> response body). The steps between them are the same for every
resource and live only here: the seed drawn when the request has none, the sample and time
budget from the server limits, the engine call in the compute pool, the engine's errors
pointed at request fields, the samples metric. ``run(resource, request, context)`` is exactly
what the endpoint answers; the batch worker calls the same function.
"""

from __future__ import annotations

import secrets
from collections.abc import Awaitable, Callable
from dataclasses import dataclass, field
from typing import Any, Generic, Protocol, TypeVar, cast

from pydantic import BaseModel

from core.errors import LimitError, TailgaugeError
from core.parameter_risk import NestedResult
from core.precision import Precision
from service import limits, translate
from service.executor import ComputePool, Cost
from service.metrics import Metrics
from service.schemas.common import PrecisionSpec
from service.settings import Settings

SEED_BITS = 53  # JSON-safe: JavaScript numbers hold integers exactly up to 2**53 - 1


def draw_seed() -> int:
    return secrets.randbits(SEED_BITS)


class Computable(Protocol):
    """What every computing request has: a precision and an optional seed."""

    @property
    def precision(self) -> PrecisionSpec: ...

    @property
    def seed(self) -> int | None: ...


def _keep(exc: TailgaugeError) -> TailgaugeError:
    return exc


@dataclass(frozen=True)
class EngineCall:
    """One engine function and its arguments (``precision`` and ``seed`` are added by the
    pipeline); ``locate`` points the engine's own error locations at request fields."""

    fn: Callable[..., Any]
    args: tuple[Any, ...] = ()
    kwargs: dict[str, Any] = field(default_factory=dict)
    locate: Callable[[TailgaugeError], TailgaugeError] = _keep
    subject: Any = None  # a core object respond() needs besides the result (the process)
    nested: bool = False  # fn is a parameter-risk form: it returns (result, NestedResult)


@dataclass(frozen=True)
class Context:
    """What a computation runs with: the server's settings, its pool and its metrics."""

    settings: Settings
    pool: ComputePool
    metrics: Metrics
    # True once the HTTP client has gone (its queued work is then dropped); None in batches.
    gone: Callable[[], Awaitable[bool]] | None = None


Req = TypeVar("Req", bound=BaseModel)
Resp = TypeVar("Resp", bound=BaseModel)


@dataclass(frozen=True, kw_only=True)
class Resource(Generic[Req, Resp]):
    name: str  # the batch kind ("risk_measures") and the samples metric's label
    request: type[Req]
    response: type[Resp]
    check: Callable[[Req, Settings], None]
    translate: Callable[[Req, Settings], EngineCall]
    respond: Callable[[Req, Any, EngineCall, list[str]], Resp]
    samples: Callable[[Any], int]
    # The parameter-risk intervals of a nested call, added to the response in place.
    attach: Callable[[Req, Resp, NestedResult], None] | None = None
    # False: the request has no precision (a fit): the server's time limit, no precision
    # argument, no budget notes.
    precision: bool = True


async def run(resource: Resource[Req, Resp], request: Req, context: Context) -> Resp:
    """The response body of one request, server limits included; errors are raised (core
    errors located at request fields) for ``service.errors.problem`` to answer."""
    settings = context.settings
    resource.check(request, settings)
    call = resource.translate(request, settings)
    seed_given: int | None = getattr(request, "seed", None)
    seed = seed_given if seed_given is not None else draw_seed()
    if not resource.precision:
        raw = await _engine(context, call, settings.time_limit_s + settings.time_limit_grace_s,
                            Cost(samples=0), seed=seed)
        return resource.respond(request, raw, call, [])
    spec = cast(Computable, request)  # every such resource's request has a precision
    budget = limits.budget(spec.precision, settings)
    raw = await _engine(context, call, budget.wall_limit_s, _cost(call, budget.precision,
                                                                  settings),
                        precision=budget.precision, seed=seed)
    result, nested = raw if call.nested else (raw, None)
    context.metrics.samples.labels(resource.name).inc(resource.samples(result))
    notes = budget.warnings + budget.stop_warnings(
        result.stopped_by, spec.precision.relative_error
    )
    response = resource.respond(request, result, call, notes)
    if nested is not None and resource.attach is not None:
        resource.attach(request, response, nested)
    return response


def _cost(call: EngineCall, precision: Precision, settings: Settings) -> Cost:
    """The call's sample budget and claims per sample (the scheduler's work proxy); a budget
    of split_samples or more is split into block tasks across the workers."""
    model = call.args[0] if call.args else call.subject
    claims = getattr(model, "expected_claims", None)
    per_sample = max(1.0, float(claims)) if isinstance(claims, int | float) else 1.0
    samples = precision.cap
    return Cost(samples=samples, per_sample=per_sample, split=samples >= settings.split_samples)


async def _engine(context: Context, call: EngineCall, wall_limit_s: float, cost: Cost,
                  **extra: Any) -> Any:
    """The engine call in the pool, its errors located at request fields."""
    try:
        return await context.pool.run(call.fn, *call.args, wall_limit_s=wall_limit_s,
                                      cost=cost, gone=context.gone, **call.kwargs, **extra)
    except TailgaugeError as exc:
        raise call.locate(translate.engine_error_path(exc)) from exc
    except (ArithmeticError, ValueError, MemoryError) as exc:
        # A model at the edge of double precision (or of memory) that the core's own checks
        # did not catch: the request, not the server, is at fault, so 422 and not 500. The
        # exception's own text is the engine's internals, not something the caller can act on.
        raise call.locate(LimitError(
            ("portfolio",),
            "the model is outside what the engine can compute in double precision (an "
            "intermediate figure overflowed or a root could not be bracketed); rescale the "
            "amounts or narrow the parameters",
        )) from exc
