"""The synchronous client."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from typing import Any, TypeVar

import httpx

from client import _calls as calls
from client._calls import TERMINAL, Call, SubmittedRun
from client._errors import RunWaitTimeout, TransportFailed
from client._retry import RETRYABLE_TRANSPORT, RetryPolicy, retry_after_seconds
from client._tables import (
    ExceedanceResult,
    FitResult,
    LayersResult,
    RiskMeasuresResult,
    RuinResult,
    RunResult,
)
from service.schemas.runs import RunBatchIn, RunSummary

__all__ = ["Client"]

T = TypeVar("T")
Progress = Callable[[RunSummary], None]
DEFAULT_URL = "http://127.0.0.1:8000"


class Client:
    """Calls a tailgauge server. Keyword arguments of the figure methods are the request
    fields of the matching endpoint (``portfolio``, ``thresholds``, ``method``, ...), as
    dicts or as the service's schema models; they are validated before sending.

    ``timeout_s`` bounds every HTTP call (a method's own ``timeout_s`` overrides it);
    ``retry`` says which failures are tried again (connection errors and 503, never 4xx);
    ``token`` is sent as a bearer token.
    """

    def __init__(
        self, base_url: str = DEFAULT_URL, *, token: str | None = None,
        timeout_s: float = 300.0, retry: RetryPolicy | None = None,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        self._http = httpx.Client(base_url=base_url, headers=headers, timeout=timeout_s,
                                  transport=transport)
        self.retry = retry if retry is not None else RetryPolicy()

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *_: object) -> None:
        self.close()

    def close(self) -> None:
        self._http.close()

    def _run(self, call: Call[T], timeout_s: float | None = None) -> T:
        timeout = httpx.USE_CLIENT_DEFAULT if timeout_s is None else httpx.Timeout(timeout_s)
        for attempt in range(self.retry.attempts):
            last = attempt + 1 == self.retry.attempts
            try:
                response = self._http.request(call.method, call.path, json=call.body,
                                              params=call.params, headers=call.headers,
                                              timeout=timeout)
            except RETRYABLE_TRANSPORT as exc:
                if last:
                    raise TransportFailed(f"{call.method} {call.path}: {exc!r}") from exc
                time.sleep(self.retry.delay(attempt))
                continue
            if response.status_code == 503 and not last:
                time.sleep(self.retry.delay(attempt, retry_after_seconds(response)))
                continue
            return call.finish(response)
        raise AssertionError("unreachable")  # the last attempt returns or raises

    # --- figures ------------------------------------------------------------------------

    def exceedance(self, *, portfolio: Any, thresholds: Sequence[float], method: str | None = None,
                   precision: Any = None, seed: int | None = None,
                   timeout_s: float | None = None) -> ExceedanceResult:
        """POST /v1/exceedance: P(S > x) for each threshold."""
        return self._run(calls.exceedance(portfolio=portfolio, thresholds=thresholds,
                                          method=method, precision=precision, seed=seed),
                         timeout_s)

    def risk_measures(self, *, portfolio: Any, levels: Sequence[float] | None = None,
                      return_periods: Sequence[float] | None = None,
                      losses: Sequence[float] | None = None, method: str | None = None,
                      precision: Any = None, seed: int | None = None,
                      timeout_s: float | None = None) -> RiskMeasuresResult:
        """POST /v1/risk-measures: VaR and TVaR by level, losses by return period."""
        return self._run(calls.risk_measures(
            portfolio=portfolio, levels=levels, return_periods=return_periods, losses=losses,
            method=method, precision=precision, seed=seed), timeout_s)

    def layers(self, *, portfolio: Any, layers: Sequence[Any], method: str | None = None,
               precision: Any = None, seed: int | None = None,
               timeout_s: float | None = None) -> LayersResult:
        """POST /v1/layers: expected loss and attachment/exhaustion of aggregate layers."""
        return self._run(calls.layers(portfolio=portfolio, layers=layers, method=method,
                                      precision=precision, seed=seed), timeout_s)

    def ruin(self, *, process: Any, capital: Sequence[float], horizon: float | None = None,
             target_probability: float | None = None, method: str | None = None,
             precision: Any = None, seed: int | None = None,
             timeout_s: float | None = None) -> RuinResult:
        """POST /v1/ruin: ruin probabilities by initial capital."""
        return self._run(calls.ruin(
            process=process, capital=capital, horizon=horizon,
            target_probability=target_probability, method=method, precision=precision,
            seed=seed), timeout_s)

    def fit(self, *, claims: Sequence[float], reporting_threshold: float | None = None,
              censored_at: Sequence[float | None] | None = None,
              families: Sequence[str] | None = None, tail_threshold: float | None = None,
              counts: Sequence[int] | None = None, exposures: Sequence[float] | None = None,
              bootstrap: Any = None, seed: int | None = None,
              timeout_s: float | None = None) -> FitResult:
        """POST /v1/fit: severity (and count) laws fitted to loss data."""
        return self._run(calls.fit(
            claims=claims, reporting_threshold=reporting_threshold, censored_at=censored_at,
            families=families, tail_threshold=tail_threshold, counts=counts,
            exposures=exposures, bootstrap=bootstrap, seed=seed), timeout_s)

    def health(self) -> dict[str, Any]:
        return self._run(calls.health())

    # --- runs ---------------------------------------------------------------------------

    def submit_run(self, batch: RunBatchIn | Mapping[str, Any],
                   idempotency_key: str | None = None) -> SubmittedRun:
        """POST /v1/runs. Without a key, one is derived from the batch content, so sending
        the same batch again returns the same run; pass ``fresh_key()`` for a new one."""
        return self._run(calls.submit_run(batch, idempotency_key))

    def get_run(self, run_id: str) -> RunResult:
        return self._run(calls.get_run(run_id))

    def get_run_batch(self, run_id: str) -> RunBatchIn:
        """The stored batch, seeds included: submit it again to repeat the run."""
        return self._run(calls.get_run_batch(run_id))

    def cancel_run(self, run_id: str) -> RunResult:
        return self._run(calls.cancel_run(run_id))

    def list_runs(self, *, status: str | None = None, page_size: int = 50) -> Iterator[RunSummary]:
        """Every run, newest first, fetched page by page."""
        cursor: str | None = None
        while True:
            page = self._run(calls.list_runs(status, page_size, cursor))
            yield from page.runs
            if page.next_cursor is None:
                return
            cursor = page.next_cursor

    def wait_run(self, run_id: str, *, poll_interval_s: float = 0.5,
                 timeout_s: float | None = None, progress: Progress | None = None,
                 progress_bar: bool | None = None) -> RunResult:
        """Poll until the run is done, failed or cancelled. ``progress`` is called with each
        new state; a progress line is drawn on stderr when it is a terminal (or when
        ``progress_bar`` is true)."""
        bar = sys.stderr.isatty() if progress_bar is None else progress_bar
        deadline = None if timeout_s is None else time.monotonic() + timeout_s
        seen = None
        while True:
            run = self.get_run(run_id)
            state = run.progress.model_dump()
            if state != seen:
                seen = state
                if progress is not None:
                    progress(run)
                if bar:
                    print("\r" + calls.progress_line(run), end="", file=sys.stderr, flush=True)
            if run.status in TERMINAL:
                if bar:
                    print(file=sys.stderr)
                return run
            if deadline is not None and time.monotonic() >= deadline:
                raise RunWaitTimeout(run_id, timeout_s or 0.0, run)
            time.sleep(poll_interval_s)

    def run_batch(self, batch: RunBatchIn | Mapping[str, Any], *,
                  idempotency_key: str | None = None, poll_interval_s: float = 0.5,
                  timeout_s: float | None = None, progress: Progress | None = None,
                  progress_bar: bool | None = None) -> RunResult:
        """Submit a batch and wait for its results."""
        submitted = self.submit_run(batch, idempotency_key)
        return self.wait_run(submitted.run_id, poll_interval_s=poll_interval_s,
                             timeout_s=timeout_s, progress=progress, progress_bar=progress_bar)
