"""`tailgauge run BATCH.json --out RESULTS.json`: a batch without a server, for cron."""

from __future__ import annotations

import io
import json
import os
import pty
import subprocess
import sys
from typing import Any

import pytest
from server_processes import ROOT, environment

from service.cli import ProgressReport, main
from service.settings import DEFAULT_EXAMPLES_DIR
from service.store import ItemRecord, Progress, RunRecord

EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"
RUN_FIELDS = {"run_id", "name", "status", "progress", "results"}  # as GET /v1/runs/{run_id}


@pytest.fixture(autouse=True)
def _thread_pool(monkeypatch: pytest.MonkeyPatch) -> None:
    # Threads start at once; the process pool is exercised by the server tests.
    monkeypatch.setenv("TAILGAUGE_EXECUTOR", "thread")
    monkeypatch.setenv("TAILGAUGE_WORKERS", "2")


def _without_timing(body: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in body.items() if k != "elapsed_s"}


def _endpoint(kind: str) -> str:
    return "/v1/" + kind.replace("_", "-")


def test_example_batch_runs_to_the_synchronous_endpoints_answers(client, tmp_path, capsys):
    out = tmp_path / "results" / "month-end.json"
    assert main(["run", str(EXAMPLE), "--out", str(out)]) == 0
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    results = json.loads(out.read_text(encoding="utf-8"))
    assert RUN_FIELDS <= results.keys()
    assert results["status"] == "done" and results["name"] == batch["name"]
    assert results["progress"]["done"] == results["progress"]["total"] == len(batch["items"])
    assert [r["id"] for r in results["results"]] == [item["id"] for item in batch["items"]]
    for item, result in zip(batch["items"], results["results"], strict=True):
        request = {**item["request"], "seed": result["seed"]}
        synchronous = client.post(_endpoint(item["kind"]), json=request)
        assert synchronous.status_code == 200, synchronous.text
        assert _without_timing(result["result"]) == _without_timing(synchronous.json())
    err = capsys.readouterr().err  # not a terminal here: one plain line per item
    for item in batch["items"]:
        assert f"{item['id']} ({item['kind']}) done" in err
    assert f"[{len(batch['items'])}/{len(batch['items'])}]" in err
    assert "\r" not in err and f"results in {out}" in err


def test_one_bad_item_exits_non_zero_and_the_others_are_in_the_output(tmp_path, capsys):
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    batch["items"][1]["request"]["levels"] = [1.5]
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(batch), encoding="utf-8")
    out = tmp_path / "out.json"
    assert main(["run", str(path), "--out", str(out)]) == 1
    results = json.loads(out.read_text(encoding="utf-8"))
    assert results["status"] == "failed"
    statuses = {r["id"]: r["status"] for r in results["results"]}
    bad = batch["items"][1]["id"]
    assert statuses == {item["id"]: "failed" if item["id"] == bad else "done"
                        for item in batch["items"]}
    error = next(r["error"] for r in results["results"] if r["id"] == bad)
    assert error == [{"loc": ["body", "levels", 0], "msg": "Input should be less than 1",
                      "type": "less_than"}]
    err = capsys.readouterr().err
    assert f"{bad} (risk_measures) failed: body.levels.0: Input should be less than 1" in err


def test_a_malformed_batch_exits_2_and_writes_nothing(tmp_path, capsys):
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    batch["items"][2]["id"] = batch["items"][0]["id"]
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(batch), encoding="utf-8")
    out = tmp_path / "out.json"
    assert main(["run", str(path), "--out", str(out)]) == 2
    assert not out.exists()
    err = capsys.readouterr().err
    assert f"{path} is not a valid batch" in err and "items.2.id: duplicate id" in err
    assert main(["run", str(tmp_path / "missing.json"), "--out", str(out)]) == 2
    assert "cannot read" in capsys.readouterr().err
    path.write_text('{"items": []}', encoding="utf-8")
    assert main(["run", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "name: Field required" in err and "items: List should have at least 1 item" in err


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def _run(done: int, failed: int, total: int) -> RunRecord:
    queued = total - done - failed
    return RunRecord(seq=1, run_id="r", name="n", status="running", batch_hash="h",
                     idempotency_key=None, engine_version="0", created_at="", updated_at="",
                     progress=Progress(total=total, done=done, failed=failed, queued=queued))


def _item(status: str, error: list[dict[str, Any]] | None = None) -> ItemRecord:
    return ItemRecord(run_id="r", run_seq=1, position=0, item_id="motor", kind="layers",
                      request={}, seed=1, status=status, attempts=1, error=error)  # type: ignore[arg-type]


def test_on_a_terminal_progress_is_one_bar_redrawn_in_place():
    stream = _Terminal()
    report = ProgressReport(stream)
    report.start(_run(0, 0, 4))
    report.item(_item("done"), _run(1, 0, 4))
    report.item(_item("failed", [{"loc": ["body", "layers"], "msg": "bad", "type": "t"}]),
                _run(1, 1, 4))
    text = stream.getvalue()
    frames = text.split("\r")[1:]
    assert len(frames) == 3 and "\n" not in text  # redrawn in place, never a new line
    assert frames[0].startswith("[" + "-" * 30 + "] 0/4")
    assert frames[1].startswith("[" + "#" * 7 + "-" * 23 + "] 1/4")
    assert frames[2].startswith("[" + "#" * 15 + "-" * 15 + "] 2/4, 1 failed")


def test_the_command_draws_a_bar_when_stderr_is_a_terminal(tmp_path):
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    batch["items"] = batch["items"][:2]
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(batch), encoding="utf-8")
    parent, child = pty.openpty()
    env = environment({"TAILGAUGE_EXECUTOR": "thread", "TAILGAUGE_WORKERS": "2"})
    process = subprocess.Popen([sys.executable, "-m", "service.cli", "run", str(path),
                                "--out", str(tmp_path / "o.json")], cwd=ROOT,
                               stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                               stderr=child, env=env)
    os.close(child)
    output = b""
    while True:  # read while it runs: the terminal's buffer is small
        try:
            chunk = os.read(parent, 4096)
        except OSError:  # EIO: the command closed the terminal
            break
        if not chunk:
            break
        output += chunk
    os.close(parent)
    assert process.wait(timeout=60) == 0, output
    text = output.decode()
    assert "\r[" in text and "] 2/2" in text and "done: 2 done, 0 failed of 2" in text
    assert (tmp_path / "o.json").exists()
