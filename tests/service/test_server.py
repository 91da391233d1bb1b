"""A real server (`tailgauge serve` in a subprocess, process pool) under concurrent load."""

from __future__ import annotations

import asyncio
import subprocess
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import numpy as np
import pytest
from scipy import stats
from server_processes import start_server

CONCURRENT = 32
THRESHOLDS = [300.0, 450.0]


def _start_server(tmp: Path) -> tuple[subprocess.Popen[bytes], str]:
    # `tailgauge serve` from this tree (python -m service.cli), never one found on PATH.
    return start_server(tmp / "data", tmp / "server.log", workers=2, via_cli=True)


def _stop(process: subprocess.Popen[bytes]) -> None:
    process.terminate()
    try:
        process.wait(timeout=15)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    tmp = tmp_path_factory.mktemp("server")
    process, base = _start_server(tmp)
    try:
        yield base
    finally:
        _stop(process)
    assert (tmp / "data").is_dir()


def _compound_poisson_exponential_sf(x: float, mean_count: float, mean_claim: float) -> float:
    # Reference: S = sum of N exponential claims, N ~ Poisson; given N = n, S ~ gamma(n, m), so
    # P(S > x) = sum_n P(N = n) gamma(n, m).sf(x) (closed-form series, scipy.stats; the terms
    # beyond n = 200 are below 1e-100 for mean 20).
    n = np.arange(1, 200)
    terms = stats.poisson(mean_count).pmf(n) * stats.gamma(a=n, scale=mean_claim).sf(x)
    return float(np.sum(terms))


def _body(seed: int) -> dict:
    return {
        "portfolio": {"lines": [{"count": {"kind": "poisson", "mean": 20.0},
                                 "severity": {"family": "exponential", "mean": 10.0}}]},
        "thresholds": THRESHOLDS,
        "precision": {"samples": 150_000},
        "seed": seed,
    }


async def _load(base: str) -> tuple[list[httpx.Response], list[float], list[int]]:
    async with httpx.AsyncClient(base_url=base, timeout=120) as client:
        work = [asyncio.create_task(client.post("/v1/exceedance", json=_body(seed)))
                for seed in range(CONCURRENT)]
        latencies: list[float] = []
        in_flight: list[int] = []
        async with httpx.AsyncClient(base_url=base, timeout=5) as probe:
            await asyncio.sleep(0.2)
            while not all(task.done() for task in work):
                started = time.perf_counter()
                health = await probe.get("/v1/health")
                latencies.append(time.perf_counter() - started)
                assert health.status_code == 200
                in_flight.append(health.json()["computations_in_flight"])
                await asyncio.sleep(0.1)
        return await asyncio.gather(*work), latencies, in_flight


def test_concurrent_requests_all_answer_and_health_stays_fast(server):
    responses, latencies, in_flight = asyncio.run(_load(server))
    exact = [_compound_poisson_exponential_sf(x, 20.0, 10.0) for x in THRESHOLDS]
    for seed, response in enumerate(responses):
        assert response.status_code == 200, response.text
        body = response.json()
        assert body["seed"] == seed
        for estimate, p in zip(body["estimates"], exact, strict=True):
            # 5 standard errors over 64 estimates: a false alarm has odds below 1e-4.
            assert abs(estimate["probability"] - p) <= 5 * estimate["std_error"], (seed, estimate)
    assert max(in_flight) >= 2, "health was never measured while computations ran"
    # Contract: health answers within 1 s while heavy requests run.
    assert max(latencies) < 1.0, latencies
    print(f"\nhealth under load: {len(latencies)} probes, max {max(latencies) * 1000:.1f} ms, "
          f"median {sorted(latencies)[len(latencies) // 2] * 1000:.1f} ms, "
          f"in flight up to {max(in_flight)}")


def test_real_server_refuses_bad_input_and_exposes_metrics(server):
    bad = _body(1)
    bad["portfolio"]["lines"][0]["severity"]["mean"] = -1.0
    response = httpx.post(f"{server}/v1/exceedance", json=bad, timeout=10)
    assert response.status_code == 422
    assert response.json()["detail"][0]["loc"] == [
        "body", "portfolio", "lines", 0, "severity", "exponential", "mean",
    ]
    metrics = httpx.get(f"{server}/metrics", timeout=10).text
    assert 'tailgauge_http_requests_total{method="POST",route="/v1/exceedance",status="422"}' in (
        metrics
    )
    assert "tailgauge_computations_in_flight 0.0" in metrics



def _children(pid: int) -> set[int]:
    out = subprocess.run(["ps", "-o", "pid=", "--ppid", str(pid)], capture_output=True,
                         text=True, check=False).stdout
    return {int(word) for word in out.split()}


def _alive(pid: int) -> bool:
    # A reaped process is gone; an unreaped one shows state Z (PID 1 may not reap here).
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except FileNotFoundError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def test_workers_exit_when_the_server_is_killed_outright(tmp_path):
    process, _ = _start_server(tmp_path)
    deadline = time.monotonic() + 20
    workers: set[int] = set()
    while len(workers) < 2 and time.monotonic() < deadline:  # pool workers + resource tracker
        workers = _children(process.pid)
        time.sleep(0.2)
    assert len(workers) >= 2, workers
    process.kill()  # SIGKILL: no shutdown code runs in the server
    process.wait()
    # A worker notices only once its engine import is done: 10 s and more on a loaded machine.
    deadline = time.monotonic() + 40
    while any(_alive(pid) for pid in workers) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not any(_alive(pid) for pid in workers)
