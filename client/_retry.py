"""When to try a call again, and how long to wait first.

Retried: transport failures (refused or dropped connections) and 503 answers. Never retried:
4xx answers (the same request would be refused again) and read time-outs (the server may still
be computing; sending it again would double the work). Waits grow exponentially with full
jitter, and a 503's Retry-After is honoured (capped by ``max_delay_s``).
"""

from __future__ import annotations

import random
from dataclasses import dataclass, field

import httpx

__all__ = ["RetryPolicy"]

# Errors after which the request may not have reached the server, or its answer was lost.
RETRYABLE_TRANSPORT: tuple[type[Exception], ...] = (
    httpx.ConnectError, httpx.ConnectTimeout, httpx.ReadError, httpx.WriteError,
    httpx.RemoteProtocolError, httpx.PoolTimeout,
)


@dataclass(frozen=True, kw_only=True)
class RetryPolicy:
    """``attempts`` tries in all (1 = no retry); the n-th wait is uniform in
    [0, min(max_delay_s, base_delay_s * 2**n)], or the server's Retry-After when it sent one."""

    attempts: int = 4
    base_delay_s: float = 0.25
    max_delay_s: float = 10.0
    rng: random.Random = field(default_factory=random.Random, compare=False, repr=False)

    def __post_init__(self) -> None:
        if self.attempts < 1:
            raise ValueError("attempts must be at least 1")
        if self.base_delay_s < 0 or self.max_delay_s < 0:
            raise ValueError("base_delay_s and max_delay_s must be non-negative")

    def delay(self, retry: int, retry_after: float | None = None) -> float:
        """Seconds to wait before retry number ``retry`` (0-based)."""
        if retry_after is not None:
            return min(max(retry_after, 0.0), self.max_delay_s)
        return self.rng.uniform(0.0, min(self.max_delay_s, self.base_delay_s * 2.0**retry))


def retry_after_seconds(response: httpx.Response) -> float | None:
    """Retry-After in seconds (the delta-seconds form; an HTTP date is not used by this server)."""
    value = response.headers.get("Retry-After")
    if value is None:
        return None
    try:
        return max(float(value), 0.0)
    except ValueError:
        return None
