"""Fair scheduling (service.scheduler): small work goes before a large request's queued
blocks, a request that cannot finish in time is refused at once (503 overloaded, Retry-After,
the documented error shape), and the queued work of a client that has gone is dropped."""

from __future__ import annotations

import asyncio
import threading
import time

import pytest

from service.backends import LocalBackend
from service.errors import ComputationUnavailable
from service.executor import ComputePool, Cost
from service.metrics import Metrics
from service.scheduler import Overloaded, Scheduler


def _record(log: list[str], name: str, seconds: float = 0.05) -> str:
    log.append(name)
    time.sleep(seconds)
    return name


@pytest.fixture
def one_slot():
    backend = LocalBackend("thread", 1)
    backend.start()
    yield Scheduler(backend)
    backend.shutdown()


def test_small_work_starts_before_the_queued_blocks_of_a_large_request(one_slot):
    log: list[str] = []
    large = one_slot.admit("large", 0.0, 60.0)
    spans = [one_slot.submit(large, _record, log, f"span{i}", work=0.0, span=False)
             for i in range(6)]
    small = one_slot.admit("small", 0.0, 60.0)
    one_slot.submit(small, _record, log, "small", work=0.0, span=False).result(timeout=10)
    for future in spans:
        future.result(timeout=10)
    # span0 was running when the small call arrived; the small call went next.
    assert log.index("small") == 1, log


def test_a_stream_of_small_work_does_not_starve_a_large_request():
    # Two slots: while small work is queued, large work still keeps one of them, so a large
    # request progresses under a steady stream of small ones (it used to wait for the small
    # lane to run dry, in a mixed load until its time limit).
    backend = LocalBackend("thread", 2)
    backend.start()
    scheduler = Scheduler(backend)
    try:
        log: list[str] = []
        small = scheduler.admit("small", 0.0, 60.0)
        futures = [scheduler.submit(small, _record, log, "small0", 0.05, work=0.0, span=False),
                   scheduler.submit(small, _record, log, "small1", 1.0, work=0.0, span=False)]
        futures += [scheduler.submit(small, _record, log, f"small{i}", 0.05, work=0.0,
                                     span=False) for i in range(2, 6)]
        large = scheduler.admit("large", 0.0, 60.0)
        futures += [scheduler.submit(large, _record, log, f"span{i}", 0.05, work=0.0,
                                     span=False) for i in range(3)]
        for future in futures:
            future.result(timeout=20)
        # small0 ended first: its slot went to the large request although small work waited
        # (the other slot was still busy with small1).
        assert sorted(log[:2]) == ["small0", "small1"], log
        assert log[2:5] == ["span0", "span1", "span2"], log
    finally:
        backend.shutdown()


def test_large_requests_are_served_in_arrival_order(one_slot):
    log: list[str] = []
    first, second = one_slot.admit("large", 0.0, 60.0), one_slot.admit("large", 0.0, 60.0)
    futures = [one_slot.submit(job, _record, log, f"{name}{i}", 0.01, work=0.0, span=False)
               for i in range(3) for job, name in ((second, "b"), (first, "a"))]
    for future in futures:
        future.result(timeout=10)
    # b0 started at once (the slot was free); then every queued span of the older request.
    assert log == ["b0", "a0", "a1", "a2", "b1", "b2"], log


def test_a_request_that_cannot_start_in_time_is_refused_with_a_retry_time(one_slot):
    one_slot.rate["large"] = 1e-3  # seconds per work unit, as if measured
    one_slot.admit("large", 20_000.0, 60.0)  # 20 s of work on the one slot
    one_slot.admit("large", 1_000.0, 25.0)  # starts after 20 s: within its 25 s
    with pytest.raises(Overloaded) as refused:
        one_slot.admit("large", 1_000.0, 15.0)  # would start after 21 s > 15 s
    assert refused.value.wait_s == pytest.approx(21.0, abs=0.01)
    assert refused.value.retry_after_s == 6  # ceil(21 - 15)
    # A small request waits only for small work: it is admitted.
    one_slot.admit("small", 1_000.0, 10.0)


def test_while_small_work_has_a_slot_large_work_ahead_is_shared_by_one():
    # Two slots and small jobs about: large work keeps one slot and small work the other
    # (Scheduler._next), so 20 s of large work ahead delays a new large job by 20 s, not 10 s,
    # and the small work ahead (on its own slot) delays it by nothing.
    backend = LocalBackend("thread", 2)
    scheduler = Scheduler(backend)
    scheduler.rate["large"] = scheduler.rate["small"] = 1e-3
    scheduler.admit("large", 20_000.0, 60.0)
    scheduler.admit("large", 1.0, 11.0)  # alone with large work: 20 s over 2 slots, 10 s
    scheduler.admit("small", 5_000.0, 60.0)
    with pytest.raises(Overloaded) as refused:
        scheduler.admit("large", 1.0, 15.0)
    assert refused.value.wait_s == pytest.approx(20.0, abs=0.05)
    scheduler.admit("large", 1.0, 25.0)
    # Small work ahead shares the one slot left to it: 5 s (plus the call's fixed cost).
    with pytest.raises(Overloaded) as small_refused:
        scheduler.admit("small", 1.0, 4.0)
    assert small_refused.value.wait_s == pytest.approx(5.02, abs=0.01)


def test_work_ahead_counts_for_no_more_than_its_own_time_left(one_slot):
    # The engine stops at a job's time limit: 1e9 units (1e6 s) ahead that must end within
    # 10 s delay a new job by 10 s at most.
    one_slot.rate["large"] = 1e-3
    one_slot.admit("large", 1e9, 10.0)
    one_slot.admit("large", 1.0, 11.0)
    with pytest.raises(Overloaded):
        one_slot.admit("large", 1.0, 9.0)


def test_closing_a_job_drops_its_queued_tasks(one_slot):
    log: list[str] = []
    busy = one_slot.admit("small", 0.0, 60.0)
    running = one_slot.submit(busy, _record, log, "busy", 0.3, work=0.0, span=False)
    job = one_slot.admit("large", 0.0, 60.0)
    queued = [one_slot.submit(job, _record, log, f"dropped{i}", work=0.0, span=False)
              for i in range(3)]
    one_slot.close(job)
    running.result(timeout=10)
    time.sleep(0.1)
    assert all(f.cancelled() for f in queued)
    assert log == ["busy"]


def test_the_queued_call_of_a_client_that_has_gone_is_dropped():
    log: list[str] = []
    pool = ComputePool(kind="thread", workers=1, metrics=Metrics())
    pool.start()
    try:
        async def scenario() -> None:
            blocker = asyncio.create_task(pool.run(_record, log, "blocker", 1.0,
                                                   wall_limit_s=30, cost=Cost(samples=0)))
            await asyncio.sleep(0.1)
            calls = 0

            async def gone() -> bool:
                nonlocal calls
                calls += 1
                return calls >= 2

            started = time.monotonic()
            with pytest.raises(ComputationUnavailable) as dropped:
                await pool.run(_record, log, "never", wall_limit_s=30, cost=Cost(samples=0),
                               gone=gone)
            assert dropped.value.kind == "client_gone"
            assert time.monotonic() - started < 0.9  # noticed while the blocker still ran
            await blocker

        asyncio.run(scenario())
        time.sleep(0.1)
        assert log == ["blocker"]
        assert pool.in_flight == 0
    finally:
        pool.shutdown()


def test_overload_is_answered_at_once_as_a_503_in_the_error_shape(make_client):
    client = make_client()
    pool: ComputePool = client.app.state.pool
    pool.scheduler.admit("large", 1e12, 1e9)  # work the server would need days for
    body = {"portfolio": {"lines": [{"count": {"kind": "fixed", "n": 2}, "severity": {
        "family": "exponential", "mean": 1.0}}]}, "thresholds": [5.0],
        "precision": {"samples": 200_000}, "seed": 1}
    started = time.monotonic()
    answer = client.post("/v1/exceedance", json=body)
    assert time.monotonic() - started < 1.0
    assert answer.status_code == 503
    assert int(answer.headers["Retry-After"]) >= 1
    (entry,) = answer.json()["detail"]
    assert entry["type"] == "overloaded" and entry["loc"] == ["body"]
    assert "busy" in entry["msg"]


def test_a_thread_lost_in_between_does_not_leave_the_slot_taken(one_slot):
    # A task whose function raises frees its slot for the next one.
    job = one_slot.admit("small", 0.0, 60.0)

    def fail() -> None:
        raise RuntimeError("boom")

    with pytest.raises(RuntimeError):
        one_slot.submit(job, fail, work=0.0, span=False).result(timeout=10)
    done = threading.Event()
    one_slot.submit(job, done.set, work=0.0, span=False).result(timeout=10)
    assert done.is_set()
