"""The scale benchmark (python -m bench.scale) runs end to end on a tiny budget and prints its
tables; its timings are measurements and are not checked here. What is checked is what must
hold at any size: the figures of the split request are the same to the last bit on 1 worker,
2 workers and a 2-process LocalCluster, and no request of the mixed load failed."""

import json

from bench import load, scale


def test_scale_bench_runs_on_a_tiny_budget(capsys):
    assert scale.main(["--quick"]) == 0
    printed = capsys.readouterr().out
    assert "| executor | wall s | worker CPU s | cores used |" in printed
    assert "| class | requests | errors | p50 ms | p99 ms | max ms |" in printed
    assert "## Ratios against the targets of issue 16" in printed
    data = json.loads((load.OUT / "scale_quick.json").read_text())
    split = data["split"]
    assert set(split["rows"]) == {"process, 1 worker", "process, 2 workers",
                                  "dask LocalCluster, 2 processes"}
    assert split["identical"] is True
    assert all(row["workers_cpu_s"] > 0 for row in split["rows"].values()), split["rows"]
    assert data["mixed"]["errors"] == 0 and data["mixed"]["recheck"]["different"] == 0
    over = data["overload"]
    assert over["accepted"] + over["refused"] == over["requests"], over
