"""A real server on loopback (``python -m service.cli serve``) and a fault-injecting TCP proxy
in front of it, for the client tests (the fixtures are in conftest.py)."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


@dataclass
class Served:
    base_url: str
    process: subprocess.Popen[bytes]
    log: Path


def start_server(data_dir: Path, log: Path, **env_overrides: str) -> Served:
    port = free_port()
    env = {**os.environ, "TAILGAUGE_EXECUTOR": "thread", **env_overrides}
    with log.open("wb") as out:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--host", "127.0.0.1",
             "--port", str(port), "--data-dir", str(data_dir), "--workers", "2"],
            stdout=out, stderr=subprocess.STDOUT, env=env, cwd=REPO,
        )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise AssertionError(f"server exited early:\n{log.read_text()}")
        try:
            if httpx.get(f"{base}/v1/health", timeout=1).status_code == 200:
                return Served(base, process, log)
        except httpx.TransportError:
            time.sleep(0.1)
    process.kill()
    raise AssertionError(f"server did not come up:\n{log.read_text()}")


def stop_server(served: Served) -> None:
    served.process.terminate()
    try:
        served.process.wait(timeout=15)
    except subprocess.TimeoutExpired:
        served.process.kill()
        served.process.wait()


# --- the proxy ------------------------------------------------------------------------------


def _read_message(sock: socket.socket, buffer: bytearray) -> bytes | None:
    """One HTTP/1.1 message (headers + Content-Length body) from ``sock``; None at EOF."""
    while b"\r\n\r\n" not in buffer:
        chunk = sock.recv(65536)
        if not chunk:
            return None
        buffer += chunk
    head_end = buffer.index(b"\r\n\r\n") + 4
    length = 0
    for line in bytes(buffer[:head_end]).split(b"\r\n"):
        if line.lower().startswith(b"content-length:"):
            length = int(line.split(b":", 1)[1])
    while len(buffer) < head_end + length:
        chunk = sock.recv(65536)
        if not chunk:
            return None
        buffer += chunk
    message = bytes(buffer[: head_end + length])
    del buffer[: head_end + length]
    return message


@dataclass
class FaultProxy:
    """Relays HTTP requests to ``upstream``. A fault queued for a request-line prefix (e.g.
    ``b"POST /v1/runs"``) applies to the next matching request: ``"503"`` answers 503 with
    Retry-After 0 without forwarding; ``"drop"`` forwards the request, reads the server's
    answer and closes the client's connection without sending it."""

    upstream_port: int
    port: int = field(default_factory=free_port)
    faults: list[tuple[bytes, str]] = field(default_factory=list)
    seen: list[bytes] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def inject(self, prefix: bytes, fault: str, times: int = 1) -> None:
        with self.lock:
            self.faults += [(prefix, fault)] * times

    def count(self, prefix: bytes) -> int:
        with self.lock:
            return sum(1 for line in self.seen if line.startswith(prefix))

    def _fault_for(self, line: bytes) -> str | None:
        with self.lock:
            self.seen.append(line)
            for i, (prefix, fault) in enumerate(self.faults):
                if line.startswith(prefix):
                    del self.faults[i]
                    return fault
        return None

    def _forward(self, request: bytes) -> bytes | None:
        with socket.create_connection(("127.0.0.1", self.upstream_port), timeout=60) as up:
            up.sendall(request)
            return _read_message(up, bytearray())

    def _serve(self, conn: socket.socket) -> None:
        buffer = bytearray()
        with conn:
            while (request := _read_message(conn, buffer)) is not None:
                fault = self._fault_for(request.split(b"\r\n", 1)[0])
                if fault == "503":
                    body = b'{"detail":[{"loc":[],"msg":"busy (injected)","type":"overloaded"}]}'
                    conn.sendall(b"HTTP/1.1 503 Service Unavailable\r\nRetry-After: 0\r\n"
                                 b"Content-Type: application/json\r\nContent-Length: "
                                 + str(len(body)).encode() + b"\r\n\r\n" + body)
                    continue
                answer = self._forward(request)
                if fault == "drop" or answer is None:
                    return  # the server did the work; its answer never reaches the client
                conn.sendall(answer)

    def start(self) -> None:
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(16)
        self._listener = listener

        def accept() -> None:
            while True:
                try:
                    conn, _ = listener.accept()
                except OSError:
                    return
                threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

        threading.Thread(target=accept, daemon=True).start()

    def stop(self) -> None:
        self._listener.close()
