"""A headless Chromium driven over the DevTools protocol on a pipe (no network, no extra
package): load a page, collect console errors, query the DOM, take a screenshot.

Chromium is started with ``--remote-debugging-pipe``: it reads protocol messages from fd 3
and writes to fd 4, each a JSON object ended by a NUL byte. The child maps two pipes of ours
onto those numbers just before it executes Chromium.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import queue
import shutil
import subprocess
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage", "--disable-extensions", "--mute-audio",
         "--remote-debugging-pipe"]
CALL_TIMEOUT_S = 30.0


def _high_pipe() -> tuple[int, int]:
    """A pipe whose two ends are numbered 10 or above, so that moving them onto 3 and 4 in
    the child can never overwrite one with the other."""
    low_r, low_w = os.pipe()
    r = fcntl.fcntl(low_r, fcntl.F_DUPFD_CLOEXEC, 10)
    w = fcntl.fcntl(low_w, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(low_r)
    os.close(low_w)
    return r, w


def chromium_path() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


@dataclass
class PageVisit:
    errors: list[str] = field(default_factory=list)  # console errors, exceptions, log errors
    requests: list[str] = field(default_factory=list)  # every URL the page asked for


class Browser:
    """One Chromium process; use as a context manager."""

    def __init__(self, profile_dir: Path, *, width: int = 1200, height: int = 900) -> None:
        binary = chromium_path()
        if binary is None:
            raise RuntimeError("chromium is not installed")
        self.width, self.height = width, height
        self.log = profile_dir / "chromium.log"
        to_browser_r, self._to_browser = _high_pipe()
        self._from_browser, from_browser_w = _high_pipe()

        def onto_3_and_4() -> None:  # runs in the child, before exec
            os.dup2(to_browser_r, 3)  # dup2 leaves 3 and 4 inheritable
            os.dup2(from_browser_w, 4)

        # close_fds=False keeps 3 and 4 open through exec; every other descriptor of ours is
        # non-inheritable (PEP 446) and closes there anyway.
        self.process = subprocess.Popen(
            [binary, *FLAGS, f"--user-data-dir={profile_dir}", f"--window-size={width},{height}",
             "about:blank"],
            close_fds=False, preexec_fn=onto_3_and_4, stdin=subprocess.DEVNULL,
            stdout=subprocess.DEVNULL, stderr=self.log.open("wb"),
        )
        os.close(to_browser_r)
        os.close(from_browser_w)
        self._next_id = 0
        self._inbox: queue.Queue[dict[str, Any] | None] = queue.Queue()
        self._events: list[dict[str, Any]] = []
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()
        self.session = self._open_page()

    def __enter__(self) -> Browser:
        return self

    def __exit__(self, *_: object) -> None:
        self.close()

    # --- protocol plumbing ------------------------------------------------------------------

    def _read(self) -> None:
        buffer = b""
        while True:
            try:
                chunk = os.read(self._from_browser, 1 << 16)
            except OSError:
                chunk = b""
            if not chunk:
                self._inbox.put(None)
                return
            buffer += chunk
            while b"\0" in buffer:
                message, buffer = buffer.split(b"\0", 1)
                self._inbox.put(json.loads(message))

    def call(self, method: str, params: dict[str, Any] | None = None, *,
             session: str | None = None, timeout: float = CALL_TIMEOUT_S) -> dict[str, Any]:
        self._next_id += 1
        message: dict[str, Any] = {"id": self._next_id, "method": method,
                                   "params": params or {}}
        if session is not None:
            message["sessionId"] = session
        os.write(self._to_browser, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._take(deadline, method)
            if reply.get("id") == self._next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                result: dict[str, Any] = reply.get("result", {})
                return result
            self._events.append(reply)

    def _take(self, deadline: float, waiting_for: str) -> dict[str, Any]:
        try:
            reply = self._inbox.get(timeout=max(0.01, deadline - time.monotonic()))
        except queue.Empty:
            raise TimeoutError(f"no answer from chromium to {waiting_for}") from None
        if reply is None:
            try:
                tail = self.log.read_text(errors="replace")[-2000:]
            except OSError as exc:
                tail = f"(no log: {exc})"
            raise RuntimeError(f"chromium closed the pipe while waiting for {waiting_for} "
                               f"(exit status {self.process.poll()}); its log ends:\n{tail}")
        return reply

    def wait_event(self, method: str, timeout: float = CALL_TIMEOUT_S) -> dict[str, Any]:
        for event in self._events:
            if event.get("method") == method and event.get("sessionId") == self.session:
                self._events.remove(event)
                return event
        deadline = time.monotonic() + timeout
        while True:
            event = self._take(deadline, method)
            self._events.append(event)
            if event.get("method") == method and event.get("sessionId") == self.session:
                self._events.remove(event)
                return event

    def _open_page(self) -> str:
        target = self.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = str(self.call("Target.attachToTarget",
                                {"targetId": target, "flatten": True})["sessionId"])
        for method in ("Runtime.enable", "Log.enable", "Page.enable", "Network.enable"):
            self.call(method, session=session)
        self.call("Emulation.setDeviceMetricsOverride",
                  {"width": self.width, "height": self.height, "deviceScaleFactor": 1,
                   "mobile": False}, session=session)
        return session

    # --- what a test uses -------------------------------------------------------------------

    def visit(self, url: str, *, settle_s: float = 0.5) -> PageVisit:
        """Load ``url``, wait for its load event and ``settle_s`` more (scripts that fetch),
        and report the errors and requests seen meanwhile."""
        self._events.clear()
        self.call("Page.navigate", {"url": url}, session=self.session)
        self.wait_event("Page.loadEventFired")
        end = time.monotonic() + settle_s
        while time.monotonic() < end:
            try:
                event = self._inbox.get(timeout=max(0.01, end - time.monotonic()))
            except queue.Empty:
                break
            if event is not None:
                self._events.append(event)
        return self._summarise()

    def _summarise(self) -> PageVisit:
        visit = PageVisit()
        for event in self._events:
            method, params = event.get("method"), event.get("params", {})
            if method == "Runtime.consoleAPICalled" and params.get("type") in ("error",
                                                                                "assert"):
                texts = [str(a.get("value", a.get("description", ""))) for a in
                         params.get("args", [])]
                visit.errors.append("console: " + " ".join(texts))
            elif method == "Runtime.exceptionThrown":
                details = params.get("exceptionDetails", {})
                visit.errors.append("exception: " + str(
                    details.get("exception", {}).get("description", details.get("text"))))
            elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
                entry = params["entry"]
                visit.errors.append(f"log: {entry.get('text')} ({entry.get('url', '')})")
            elif method == "Network.requestWillBeSent":
                visit.requests.append(str(params.get("request", {}).get("url", "")))
        return visit

    def evaluate(self, expression: str) -> Any:
        """The JSON value of a JavaScript expression in the page."""
        reply = self.call("Runtime.evaluate", {"expression": expression,
                                               "returnByValue": True, "awaitPromise": True},
                          session=self.session)
        if "exceptionDetails" in reply:
            raise RuntimeError(f"page script failed: {reply['exceptionDetails']}")
        return reply.get("result", {}).get("value")

    def screenshot(self, path: Path, *, full_page: bool = True) -> Path:
        height = self.height
        if full_page:
            metrics = self.call("Page.getLayoutMetrics", session=self.session)
            height = int(min(metrics["cssContentSize"]["height"], 16000))
            self.call("Emulation.setDeviceMetricsOverride",
                      {"width": self.width, "height": height, "deviceScaleFactor": 1,
                       "mobile": False}, session=self.session)
        data = self.call("Page.captureScreenshot", {"format": "png"},
                         session=self.session)["data"]
        path.write_bytes(base64.b64decode(data))
        if full_page:
            self.call("Emulation.setDeviceMetricsOverride",
                      {"width": self.width, "height": self.height, "deviceScaleFactor": 1,
                       "mobile": False}, session=self.session)
        return path

    def close(self) -> None:
        try:
            self.call("Browser.close", timeout=5)
        except (RuntimeError, TimeoutError, OSError):
            pass
        try:
            self.process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        for fd in (self._to_browser, self._from_browser):
            try:
                os.close(fd)
            except OSError:
                pass
