"""Real servers and commands in subprocesses, always from this source tree.

Started as ``sys.executable -m ...`` with this repository as the working directory, never a
``tailgauge`` found on PATH (which may be another checkout's install).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from collections.abc import Mapping, Sequence
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[2]
START_TIMEOUT_S = 60.0


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def environment(extra: Mapping[str, str] | None = None) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("TAILGAUGE_")}
    env["PYTHONPATH"] = str(ROOT)
    env.update(extra or {})
    return env


def run_module(args: Sequence[str], *, env: Mapping[str, str] | None = None,
               timeout: float = 120.0) -> subprocess.CompletedProcess[str]:
    """``python -m ARGS`` to the end, output captured as text."""
    return subprocess.run([sys.executable, "-m", *args], cwd=ROOT, env=environment(env),
                          capture_output=True, text=True, timeout=timeout, check=False)


def start_server(
    data_dir: Path, log: Path, *, env: Mapping[str, str] | None = None, workers: int = 2,
    via_cli: bool = False,
) -> tuple[subprocess.Popen[bytes], str]:
    """A server on a free loopback port, healthy on return: ``uvicorn service.app:app``
    (``tailgauge serve`` through ``python -m service.cli`` with via_cli)."""
    port = free_port()
    settings = {"TAILGAUGE_EXECUTOR": "process", "TAILGAUGE_WORKERS": str(workers),
                "TAILGAUGE_RUN_WORKERS": str(workers), "TAILGAUGE_DATA_DIR": str(data_dir),
                **(env or {})}
    if via_cli:
        command = ["service.cli", "serve", "--host", "127.0.0.1", "--port", str(port)]
    else:
        command = ["uvicorn", "service.app:app", "--host", "127.0.0.1", "--port", str(port)]
    with log.open("ab") as out:
        process = subprocess.Popen([sys.executable, "-m", *command], cwd=ROOT,
                                   env=environment(settings), stdout=out,
                                   stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise AssertionError(f"server exited early:\n{log.read_text()}")
        try:
            if httpx.get(f"{base}/v1/health", timeout=1).status_code == 200:
                return process, base
        except httpx.TransportError:
            time.sleep(0.1)
    stop(process)
    raise AssertionError(f"server did not come up:\n{log.read_text()}")


def stop(process: subprocess.Popen[bytes]) -> None:
    if process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(timeout=15)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def kill(process: subprocess.Popen[bytes]) -> None:
    """SIGKILL: no shutdown code runs (the pool's workers exit when they see it gone)."""
    process.kill()
    process.wait()
