"""The load script runs end to end on a tiny budget (its numbers are not checked here)."""

import json

from bench import load


def test_load_bench_runs_on_a_tiny_budget(capsys):
    assert load.main(["--quick"]) == 0
    printed = capsys.readouterr().out
    assert "| class | requests | errors | p50 ms | p99 ms | max ms |" in printed
    data = json.loads((load.OUT / "load_quick.json").read_text())
    classes = {row["class"]: row for row in data["latency"]}
    assert set(classes) == {"health", "cheap", "heavy", "runs"}
    assert all(row["errors"] == 0 for row in classes.values()), classes
    assert data["memory"] and data["memory"][0]["server_mib"] > 0
