"""Load test of a real server: latency by request class, errors, and server memory over time.

    python -m bench.load                 # 60 s or 3,000 requests, 8 connections (the default)
    python -m bench.load --quick         # 2.5 s or 40 requests, used by the smoke test

Starts its own server (``python -m uvicorn service.app:app`` from this tree on 127.0.0.1, a
fresh data dir, process pool of ``--workers``) and sends it a fixed mix, bounded in count and
time, to loopback only; it stops by itself. Classes:

- ``health``: GET /v1/health (answered on the event loop, never waits for the pool);
- ``cheap``: POST /v1/exceedance, 2,000 samples of one Poisson-lognormal line;
- ``heavy``: POST /v1/risk-measures, 200,000 samples of a two-line book, VaR and TVaR at
  three levels;
- ``runs``: POST /v1/runs of a 5-item batch of cheap requests, then GET of the run.

Memory is the resident set (VmRSS) of the server process and of its pool workers, sampled
every half second. After the load, up to ``--recheck`` of the cheap and heavy requests are sent
again one at a time: their answers must be the ones given under load (same seed, same figures).
The CPU load average is printed before and after (the machine may be shared). Prints markdown
tables and writes bench/out/load.json. Numbers are measurements, not pass/fail checks; the
machine may be shared, so they are noisy.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import socket
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "bench" / "out"
HOST = "127.0.0.1"  # loopback only, by design
# Request i has class MIX[i % 10]: 6 cheap, 2 health, 1 heavy, 1 runs in 10 (each class among
# the first four, so that even the smallest budget sends one of each).
MIX = ("cheap", "health", "heavy", "runs", "cheap", "cheap", "health", "cheap", "cheap",
       "cheap")
LOGNORMAL = {"count": {"kind": "poisson", "mean": 5.0},
             "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.5}}
GAMMA = {"count": {"kind": "negative_binomial", "mean": 20.0, "dispersion": 2.0},
         "severity": {"family": "gamma", "shape": 2.0, "scale": 5.0}}


def _cheap(seed: int) -> dict[str, Any]:
    return {"portfolio": {"lines": [LOGNORMAL]}, "thresholds": [300.0, 1500.0],
            "precision": {"samples": 2000}, "seed": seed}


HEAVY_SAMPLES = 200_000


def _heavy(seed: int, samples: int = HEAVY_SAMPLES) -> dict[str, Any]:
    return {"portfolio": {"lines": [LOGNORMAL, GAMMA]}, "levels": [0.99, 0.995, 0.999],
            "precision": {"samples": samples}, "seed": seed}


def _batch(seed: int) -> dict[str, Any]:
    return {"name": f"load {seed}", "items": [
        {"id": f"item-{k}", "kind": "exceedance", "request": _cheap(seed * 10 + k)}
        for k in range(5)]}


@dataclass
class Budget:
    duration_s: float
    max_requests: int
    concurrency: int
    workers: int
    # Smoke runs shrink the heavy class and the server's split size with it (still split).
    heavy_samples: int = HEAVY_SAMPLES
    split_samples: int | None = None  # the server's setting; None: its default


@dataclass
class Record:
    latencies: dict[str, list[float]] = field(default_factory=dict)
    errors: dict[str, dict[str, int]] = field(default_factory=dict)
    memory: list[tuple[float, float, float]] = field(default_factory=list)  # t, server, pool
    answers: dict[tuple[str, int], Any] = field(default_factory=dict)  # (class, seed) -> figures

    def add(self, kind: str, seconds: float, error: str | None) -> None:
        self.latencies.setdefault(kind, []).append(seconds)
        if error is not None:
            by_kind = self.errors.setdefault(kind, {})
            by_kind[error] = by_kind.get(error, 0) + 1


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((HOST, 0))
        return int(sock.getsockname()[1])


def _rss_mib(pid: int) -> float:
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:  # the process is gone
        pass
    return 0.0


def _children(pid: int) -> list[int]:
    found = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", encoding="ascii", errors="replace") as stat:
                fields = stat.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:  # fields[1] is the parent pid
            found.append(int(entry))
    return found


def _start_server(data_dir: Path, workers: int, split_samples: int | None = None
                  ) -> tuple[subprocess.Popen[bytes], str]:
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("TAILGAUGE_")}
    env.update({"TAILGAUGE_DATA_DIR": str(data_dir), "TAILGAUGE_EXECUTOR": "process",
                "TAILGAUGE_WORKERS": str(workers), "PYTHONPATH": str(ROOT)})
    if split_samples is not None:
        env["TAILGAUGE_SPLIT_SAMPLES"] = str(split_samples)
    process = subprocess.Popen(
        [sys.executable, "-m", "uvicorn", "service.app:app", "--host", HOST, "--port",
         str(port), "--log-level", "warning"],
        cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    base = f"http://{HOST}:{port}"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"the server exited with status {process.returncode}")
        try:
            if httpx.get(f"{base}/v1/health", timeout=1).status_code == 200:
                return process, base
        except httpx.TransportError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError("the server did not come up within 60 s")


def figures(body: Any) -> Any:
    """A response body without its timings: what must not change between runs."""
    if isinstance(body, dict):
        return {k: figures(v) for k, v in body.items() if k != "elapsed_s"}
    if isinstance(body, list):
        return [figures(v) for v in body]
    return body


async def _one(client: httpx.AsyncClient, kind: str, seed: int,
               answers: dict[tuple[str, int], Any] | None = None,
               heavy_samples: int = HEAVY_SAMPLES) -> str | None:
    """Send one request of the class; the error it met, or None."""
    if kind == "health":
        response = await client.get("/v1/health")
    elif kind == "cheap":
        response = await client.post("/v1/exceedance", json=_cheap(seed))
    elif kind == "heavy":
        response = await client.post("/v1/risk-measures", json=_heavy(seed, heavy_samples))
    else:
        response = await client.post("/v1/runs", json=_batch(seed))
        if response.status_code == 202:
            response = await client.get(f"/v1/runs/{response.json()['run_id']}")
    if answers is not None and kind in ("cheap", "heavy") and response.is_success:
        answers[(kind, seed)] = figures(response.json())
    return None if response.is_success else str(response.status_code)


async def _recheck(base: str, record: Record, most: int,
                   heavy_samples: int = HEAVY_SAMPLES) -> dict[str, int]:
    """Send some of the load's cheap and heavy requests again, one at a time; count the
    answers that differ from those given under load."""
    checked = {"checked": 0, "different": 0}
    picks = [key for kind in ("cheap", "heavy")
             for key in sorted(k for k in record.answers if k[0] == kind)[: most // 2]]
    async with httpx.AsyncClient(base_url=base, timeout=120) as client:
        for kind, seed in picks:
            alone: dict[tuple[str, int], Any] = {}
            await _one(client, kind, seed, alone, heavy_samples)
            checked["checked"] += 1
            checked["different"] += alone.get((kind, seed)) != record.answers[(kind, seed)]
    return checked


async def _sample_memory(pid: int, record: Record, started: float, stop: asyncio.Event) -> None:
    while not stop.is_set():
        pool = sum(_rss_mib(child) for child in _children(pid))
        record.memory.append((time.monotonic() - started, _rss_mib(pid), pool))
        try:
            await asyncio.wait_for(stop.wait(), timeout=0.5)
        except TimeoutError:
            pass


async def _load(base: str, pid: int, budget: Budget) -> tuple[Record, float]:
    record = Record()
    started = time.monotonic()
    deadline = started + budget.duration_s
    counter = iter(range(budget.max_requests))
    stop = asyncio.Event()
    sampler = asyncio.create_task(_sample_memory(pid, record, started, stop))

    async def connection() -> None:
        async with httpx.AsyncClient(base_url=base, timeout=120) as client:
            for i in counter:
                if time.monotonic() >= deadline:
                    return
                kind = MIX[i % len(MIX)]
                begun = time.perf_counter()
                try:
                    error = await _one(client, kind, seed=1000 + i, answers=record.answers,
                                       heavy_samples=budget.heavy_samples)
                except httpx.TransportError as exc:
                    error = type(exc).__name__
                record.add(kind, time.perf_counter() - begun, error)

    await asyncio.gather(*(connection() for _ in range(budget.concurrency)))
    elapsed = time.monotonic() - started
    stop.set()
    await sampler
    return record, elapsed


def _latency_rows(record: Record) -> list[dict[str, Any]]:
    rows = []
    for kind in ("health", "cheap", "heavy", "runs"):
        seconds = np.asarray(record.latencies.get(kind, []), dtype=float) * 1000.0
        if seconds.size == 0:
            continue
        errors = record.errors.get(kind, {})
        rows.append({
            "class": kind, "requests": int(seconds.size), "errors": sum(errors.values()),
            "error_kinds": errors, "p50_ms": float(np.percentile(seconds, 50)),
            "p99_ms": float(np.percentile(seconds, 99)), "max_ms": float(seconds.max()),
        })
    return rows


def _memory_rows(record: Record, rows: int = 8) -> list[dict[str, float]]:
    if not record.memory:
        return []
    picks = sorted({round(k * (len(record.memory) - 1) / max(rows - 1, 1))
                    for k in range(rows)})
    return [{"t_s": record.memory[k][0], "server_mib": record.memory[k][1],
             "pool_mib": record.memory[k][2]} for k in picks]


def _print_tables(latency: list[dict[str, Any]], memory: list[dict[str, float]],
                  elapsed: float, budget: Budget, loads: tuple[float, float],
                  recheck: dict[str, int]) -> None:
    total = sum(row["requests"] for row in latency)
    print(f"\n{total} requests in {elapsed:.1f} s ({total / elapsed:.1f}/s), "
          f"{budget.concurrency} connections, {budget.workers} pool workers; CPU load "
          f"average (1 min) {loads[0]:.2f} before, {loads[1]:.2f} after, "
          f"{os.cpu_count()} CPUs\n")
    print(f"answers sent again alone: {recheck['checked']}, different from under load: "
          f"{recheck['different']}\n")
    print("| class | requests | errors | p50 ms | p99 ms | max ms |")
    print("|---|---:|---:|---:|---:|---:|")
    for row in latency:
        print(f"| {row['class']} | {row['requests']} | {row['errors']} | {row['p50_ms']:.1f} | "
              f"{row['p99_ms']:.1f} | {row['max_ms']:.1f} |")
    print("\n| t (s) | server RSS (MiB) | pool workers RSS (MiB) | total (MiB) |")
    print("|---:|---:|---:|---:|")
    for m in memory:
        print(f"| {m['t_s']:.1f} | {m['server_mib']:.0f} | {m['pool_mib']:.0f} | "
              f"{m['server_mib'] + m['pool_mib']:.0f} |")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0] if __doc__ else None)
    parser.add_argument("--quick", action="store_true", help="2.5 s or 40 requests")
    parser.add_argument("--duration", type=float, default=60.0, help="seconds (at most 600)")
    parser.add_argument("--max-requests", type=int, default=3000, help="at most 100,000")
    parser.add_argument("--concurrency", type=int, default=8, help="connections (at most 64)")
    parser.add_argument("--workers", type=int, default=2, help="server pool workers")
    parser.add_argument("--recheck", type=int, default=20,
                        help="requests sent again alone after the load (at most 200)")
    args = parser.parse_args(argv)
    budget = Budget(duration_s=min(args.duration, 600.0),
                    max_requests=min(args.max_requests, 100_000),
                    concurrency=max(1, min(args.concurrency, 64)), workers=max(1, args.workers))
    if args.quick:
        # Heavy requests a tenth of the size, and the split size with them (still split), so
        # that the smoke run does not spend most of its time waiting for in-flight heavy work.
        budget = Budget(duration_s=2.5, max_requests=40, concurrency=4, workers=budget.workers,
                        heavy_samples=10_000, split_samples=5_000)
    recheck_most = max(0, min(args.recheck, 200)) if not args.quick else 2
    with tempfile.TemporaryDirectory(prefix="tailgauge-load-") as tmp:
        process, base = _start_server(Path(tmp) / "data", budget.workers, budget.split_samples)
        try:
            load_before = os.getloadavg()[0]
            record, elapsed = asyncio.run(_load(base, process.pid, budget))
            load_after = os.getloadavg()[0]
            recheck = asyncio.run(_recheck(base, record, recheck_most, budget.heavy_samples))
        finally:
            process.terminate()
            try:
                process.wait(timeout=20)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait()
    latency, memory = _latency_rows(record), _memory_rows(record)
    _print_tables(latency, memory, elapsed, budget, (load_before, load_after), recheck)
    OUT.mkdir(exist_ok=True)
    name = "load_quick.json" if args.quick else "load.json"
    (OUT / name).write_text(json.dumps({
        "budget": budget.__dict__, "elapsed_s": elapsed, "latency": latency,
        "cpu_load": {"before": load_before, "after": load_after, "cpus": os.cpu_count()},
        "recheck": recheck,
        "memory": [{"t_s": t, "server_mib": s, "pool_mib": p} for t, s, p in record.memory],
    }, indent=2) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
