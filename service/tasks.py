"""What a computation worker runs (a pool process, a thread, or a Dask worker): whole engine
calls and spans of one request's blocks. Module-level functions, so every executor can name
them; this module imports the core only, so a Dask worker needs no web stack loaded.

A span's group (its sampling closure over the model) travels as cloudpickle bytes, pickled once
per round by the server; a worker keeps the last few unpickled, so the spans of one round that
land on the same worker share one copy.
"""

from __future__ import annotations

import hashlib
import threading
import time
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import replace
from typing import Any

from core import spans

_CACHED_GROUPS = 8
_groups: OrderedDict[bytes, Any] = OrderedDict()
_groups_lock = threading.Lock()


def call_engine(fn: Callable[..., Any], args: tuple[Any, ...], kwargs: dict[str, Any]) -> Any:
    """Call the engine (a module-level name every executor can pickle)."""
    return fn(*args, **kwargs)


def pack_group(group: Any) -> bytes:
    import cloudpickle  # a dependency of the service (and of Dask); the core never needs it

    return bytes(cloudpickle.dumps(group))


def _group(blob: bytes) -> Any:
    import pickle

    key = hashlib.blake2b(blob, digest_size=16).digest()
    with _groups_lock:
        if key in _groups:
            _groups.move_to_end(key)
            return _groups[key]
    group = pickle.loads(blob)
    with _groups_lock:
        _groups[key] = group
        while len(_groups) > _CACHED_GROUPS:
            _groups.popitem(last=False)
    return group


def run_packed_span(blob: bytes, span: spans.Span) -> tuple[spans.SpanResult, float]:
    """Run `span` with the group packed in `blob` (the span carries a stand-in group, so
    that the closure is not pickled with every span); returns the result and the seconds it
    took (the scheduler's cost model learns from them)."""
    started = time.perf_counter()
    result = spans.run_span(replace(span, group=_group(blob)))
    return result, time.perf_counter() - started


def run_span(span: spans.Span) -> tuple[spans.SpanResult, float]:
    """Run a span in this process (thread executor: nothing to unpack)."""
    started = time.perf_counter()
    result = spans.run_span(span)
    return result, time.perf_counter() - started


def no_values(_m: int, _rng: Any) -> Any:
    """The stand-in sampling function of a span on its way to a worker (see run_packed_span)."""
    raise RuntimeError("a packed span was run without its group")
