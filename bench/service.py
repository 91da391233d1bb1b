"""Benchmark of the HTTP service: overhead over a direct engine call, and throughput.

    python -m bench.service            # a few seconds of load per measurement (~40 s)
    python -m bench.service --quick    # a tiny budget, used by the smoke test

Starts a real server (`python -m service.cli serve` on 127.0.0.1, default worker count, process
pool) as a subprocess, loopback only. Prints markdown tables and writes bench/out/service.json
(service_quick.json with --quick).
Numbers are measurements, not pass/fail checks; the machine may be shared, so they are noisy.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import httpx

from core import Line, Lognormal, Poisson, Portfolio, Precision
from core.exceedance import exceedance

OUT = Path(__file__).resolve().parent / "out"
THRESHOLDS = [300.0, 1500.0]
SEED = 7
# The README's example book: compound Poisson(5) lognormal(0, 1.5) claims.
LINE = {"label": "property", "count": {"kind": "poisson", "mean": 5.0},
        "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.5}}
PORTFOLIO = Portfolio(lines=[Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=1.5))])


def _body(samples: int) -> dict[str, Any]:
    return {"portfolio": {"lines": [LINE]}, "thresholds": THRESHOLDS,
            "precision": {"samples": samples}, "seed": SEED}


def _direct(samples: int) -> Any:
    # What the endpoint computes, called in this process with the same arguments.
    return exceedance(PORTFOLIO, THRESHOLDS, method="auto", precision=Precision(samples=samples),
                      seed=SEED)


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _wait_healthy(base: str, process: subprocess.Popen[bytes]) -> dict[str, Any]:
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError("the server exited during start-up")
        try:
            response = httpx.get(f"{base}/v1/health", timeout=1)
            if response.status_code == 200:
                return dict(response.json())
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    raise RuntimeError("the server did not answer /v1/health within 60 s")


@contextmanager
def server() -> Iterator[tuple[str, dict[str, Any]]]:
    """A server on a free loopback port with the default settings (worker count = CPUs)."""
    port = _free_port()
    with tempfile.TemporaryDirectory() as tmp:
        env = {k: v for k, v in os.environ.items() if not k.startswith("TAILGAUGE_")}
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--host", "127.0.0.1", "--port",
             str(port), "--data-dir", str(Path(tmp) / "data")],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env,
        )
        try:
            base = f"http://127.0.0.1:{port}"
            yield base, _wait_healthy(base, process)
        finally:
            process.terminate()
            try:
                process.wait(timeout=15)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()


def _timed(fn: Callable[[], Any]) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def overhead(base: str, samples: int, repeats: int) -> dict[str, Any]:
    """One request at a time: HTTP wall time vs the direct call, medians of `repeats`."""
    body = _body(samples)
    with httpx.Client(base_url=base, timeout=120) as client:
        def over_http() -> None:
            response = client.post("/v1/exceedance", json=body)
            response.raise_for_status()
            engine.append(float(response.json()["elapsed_s"]))

        engine: list[float] = []
        over_http()  # warm-up: worker imports, first-call caches
        _direct(samples)
        engine.clear()
        http_s, direct_s = [], []
        for _ in range(repeats):  # interleaved, so drifting machine load hits both alike
            http_s.append(_timed(over_http))
            direct_s.append(_timed(lambda: _direct(samples)))
    http, direct = statistics.median(http_s), statistics.median(direct_s)
    return {"samples": samples, "repeats": repeats, "http_s": http, "direct_s": direct,
            "engine_in_server_s": statistics.median(engine), "ratio": http / direct}


async def _load(base: str, body: dict[str, Any], concurrency: int, seconds: float
                ) -> dict[str, Any]:
    done = failed = 0
    stop = time.perf_counter() + seconds

    async def user(client: httpx.AsyncClient) -> None:
        nonlocal done, failed
        while time.perf_counter() < stop:
            response = await client.post("/v1/exceedance", json=body)
            if response.status_code == 200:
                done += 1
            else:
                failed += 1

    limits = httpx.Limits(max_connections=concurrency)
    async with httpx.AsyncClient(base_url=base, timeout=120, limits=limits) as client:
        start = time.perf_counter()
        await asyncio.gather(*(user(client) for _ in range(concurrency)))
        elapsed = time.perf_counter() - start
    return {"done": done, "failed": failed, "elapsed_s": elapsed}


def throughput(base: str, samples: int, concurrency: int, seconds: float) -> dict[str, Any]:
    load = asyncio.run(_load(base, _body(samples), concurrency, seconds))
    calls, start = 0, time.perf_counter()
    while time.perf_counter() - start < seconds:
        _direct(samples)
        calls += 1
    direct_rate = calls / (time.perf_counter() - start)
    return {"samples": samples, "concurrency": concurrency, "seconds": seconds,
            "requests": load["done"], "failed": load["failed"],
            "http_per_s": load["done"] / load["elapsed_s"], "direct_per_s": direct_rate}


def _table(title: str, header: list[str], rows: list[list[Any]]) -> None:
    print(f"\n## {title}\n")
    print("| " + " | ".join(header) + " |")
    print("|" + "|".join("---" for _ in header) + "|")
    for row in rows:
        print("| " + " | ".join(f"{v:.4g}" if isinstance(v, float) else str(v)
                                for v in row) + " |")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny budget (smoke test)")
    args = parser.parse_args(argv)
    big, repeats, small, seconds = (
        (10_000, 1, 1_000, 0.5) if args.quick else (100_000, 7, 10_000, 5.0))
    load_before = os.getloadavg()[0]  # other work on the machine skews every figure
    with server() as (base, health):
        workers = int(health["workers"])
        concurrency = 4 * workers  # bounded: enough to keep every worker busy
        over = overhead(base, big, repeats)
        rate = throughput(base, small, concurrency, seconds)
    print(f"\n1-minute load average before the run: {load_before:.2f} on {os.cpu_count()} CPUs")
    _table(f"Service overhead: one {big:.0e}-sample exceedance request (median of {repeats})",
           ["over HTTP, s", "direct call, s", "engine time in the server, s",
            "HTTP minus engine, ms", "ratio HTTP / direct"],
           [[over["http_s"], over["direct_s"], over["engine_in_server_s"],
             1000 * (over["http_s"] - over["engine_in_server_s"]), over["ratio"]]])
    _table(f"Throughput: {small:.0e}-sample requests, {workers} workers, {concurrency} "
           f"concurrent, {seconds:g} s",
           ["requests/s over HTTP", "direct calls/s (one process)", "requests", "failed"],
           [[rate["http_per_s"], rate["direct_per_s"], rate["requests"], rate["failed"]]])
    OUT.mkdir(exist_ok=True)
    out = {"quick": args.quick, "workers": workers, "cpus": os.cpu_count(),
           "load_average_before": load_before,
           "overhead": over, "throughput": rate}
    # The smoke test's tiny run must not overwrite the figures of a real one.
    name = "service_quick.json" if args.quick else "service.json"
    (OUT / name).write_text(json.dumps(out, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
