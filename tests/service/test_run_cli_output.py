"""`tailgauge run`: non-finite numbers in the batch file, and where --out may write.

Before: NaN in a batch file gave a traceback and exit 1; an unwritable --out was found only
after all the work was done (results lost); --out naming a symlink or a device was replaced
by a regular file. Most checks call ``main`` in process (fast); the ones that must see the
real command's exit status and stderr run ``python -m service.cli`` from this tree.
"""

from __future__ import annotations

import json
import os
import stat
import subprocess
from pathlib import Path
from typing import Any

import pytest
from server_processes import run_module

from service.cli import main
from service.settings import DEFAULT_EXAMPLES_DIR

EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"
THREADS = {"TAILGAUGE_EXECUTOR": "thread", "TAILGAUGE_WORKERS": "2"}


@pytest.fixture(autouse=True)
def _thread_pool(monkeypatch: pytest.MonkeyPatch) -> None:
    for name, value in THREADS.items():
        monkeypatch.setenv(name, value)


def _command(*args: str) -> subprocess.CompletedProcess[str]:
    return run_module(["service.cli", "run", *args], env=THREADS)


def _cli(capsys: pytest.CaptureFixture[str], *args: str) -> subprocess.CompletedProcess[str]:
    """main() in process, seen as the command would be (exit status, stderr)."""
    code = main(["run", *args])
    captured = capsys.readouterr()
    return subprocess.CompletedProcess(args, code, captured.out, captured.err)


def _small_batch(tmp_path: Path, n: int = 2) -> Path:
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    batch["items"] = batch["items"][:n]
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(batch), encoding="utf-8")
    return path


def _with_literal(tmp_path: Path, literal: str) -> tuple[Path, str]:
    """The example batch with its second item's first threshold/level replaced by literal."""
    batch = json.loads(EXAMPLE.read_text(encoding="utf-8"))
    item = batch["items"][1]
    field = "thresholds" if "thresholds" in item["request"] else "levels"
    item["request"][field][0] = "@@"
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(batch).replace('"@@"', literal), encoding="utf-8")
    return path, f"item '{item['id']}' (items[1]): request.{field}.0"


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity", "1e999", "-1e999", "1" * 400])
def test_a_non_finite_number_names_the_item_and_field_and_exits_2(tmp_path, capsys, literal):
    path, where = _with_literal(tmp_path, literal)
    out = tmp_path / "out.json"
    result = _cli(capsys, str(path), "--out", str(out))
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr
    assert result.stderr.splitlines() == [
        f"tailgauge run: {path} is not a valid batch:",
        f"  {where}: {literal} is not a finite number (NaN, Infinity and magnitudes beyond "
        "1.8e308 are refused)",
    ]
    assert not out.exists() and os.listdir(tmp_path) == ["batch.json"]


def test_the_command_itself_exits_2_on_nan_without_a_traceback(tmp_path):
    path, where = _with_literal(tmp_path, "NaN")
    result = _command(str(path), "--out", str(tmp_path / "out.json"))
    assert result.returncode == 2 and "Traceback" not in result.stderr, result.stderr
    assert f"  {where}: NaN is not a finite number" in result.stderr


def _refused_before_work(result: subprocess.CompletedProcess[str], out: Path) -> str:
    assert result.returncode == 2, result.stderr
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and "Traceback" not in result.stderr, result.stderr
    # No progress line: the batch never started ("run '...': N items" is the first one).
    assert lines[0].startswith(f"tailgauge run: cannot write the results to {out}: ")
    assert lines[0].endswith("; nothing was run")
    return lines[0]


def test_an_out_under_a_file_is_refused_before_any_work(tmp_path, capsys):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file, not a directory")
    out = blocker / "results.json"
    line = _refused_before_work(_cli(capsys, str(_small_batch(tmp_path)), "--out", str(out)), out)
    assert "Not a directory" in line


def test_an_out_that_is_a_directory_is_refused_before_any_work(tmp_path, capsys):
    out = tmp_path / "results"
    out.mkdir()
    line = _refused_before_work(_cli(capsys, str(_small_batch(tmp_path)), "--out", str(out)), out)
    assert "it is a directory" in line


def test_an_out_in_an_unwritable_place_is_refused_before_any_work(tmp_path, capsys):
    # /proc refuses new files even to root.
    out = Path("/proc/self/tailgauge-results.json")
    _refused_before_work(_cli(capsys, str(_small_batch(tmp_path)), "--out", str(out)), out)


def _results(path: Path) -> dict[str, Any]:
    body: dict[str, Any] = json.loads(path.read_text(encoding="utf-8"))
    return body


def test_a_symlinked_out_stays_a_link_and_its_target_gets_the_results(tmp_path, capsys):
    target = tmp_path / "archive" / "month-end.json"
    target.parent.mkdir()
    target.write_text("old results\n")
    target.chmod(0o640)
    link = tmp_path / "latest.json"
    link.symlink_to(target)
    result = _cli(capsys, str(_small_batch(tmp_path)), "--out", str(link))
    assert result.returncode == 0, result.stderr
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert _results(target)["status"] == "done"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640  # the file keeps its permissions
    assert sorted(os.listdir(target.parent)) == ["month-end.json"]  # no temporary left


def test_a_dangling_symlink_out_creates_its_target(tmp_path, capsys):
    target = tmp_path / "new.json"
    link = tmp_path / "link.json"
    link.symlink_to(target)
    assert _cli(capsys, str(_small_batch(tmp_path)), "--out", str(link)).returncode == 0
    assert link.is_symlink() and _results(target)["status"] == "done"


def test_a_device_out_is_written_in_place_not_replaced(tmp_path, capsys):
    result = _cli(capsys, str(_small_batch(tmp_path)), "--out", "/dev/null")
    assert result.returncode == 0, result.stderr
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_a_fifo_out_streams_the_results_to_its_reader(tmp_path, capsys):
    fifo = tmp_path / "results.fifo"
    os.mkfifo(fifo)
    reader = subprocess.Popen(["cat", str(fifo)], stdout=subprocess.PIPE, text=True)
    result = _cli(capsys, str(_small_batch(tmp_path)), "--out", str(fifo))
    received, _ = reader.communicate(timeout=60)
    assert result.returncode == 0, result.stderr
    assert stat.S_ISFIFO(fifo.stat().st_mode)
    assert json.loads(received)["status"] == "done"


def test_a_full_device_at_the_end_is_reported_without_a_traceback(tmp_path):
    result = _command(str(_small_batch(tmp_path, n=1)), "--out", "/dev/full")
    assert result.returncode == 2 and "Traceback" not in result.stderr, result.stderr
    assert result.stderr.splitlines()[-1] == (
        "tailgauge run: writing the results to /dev/full failed: No space left on device")
