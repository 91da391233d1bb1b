"""The sample-economy benchmark (python -m bench.samplescale) runs end to end on a tiny budget;
its timings are measurements and are not checked here. What is checked is what must hold at any
size: every call answered, twenty shared thresholds and each one alone were both estimated."""

import json
import math

from bench import samplescale


def test_samplescale_bench_runs_on_a_tiny_budget(capsys):
    assert samplescale.main(["--quick"]) == 0
    printed = capsys.readouterr().out
    assert "| call | seconds | x numpy floor | largest rel. error | seconds x rel. error^2 |" \
        in printed
    data = json.loads((samplescale.OUT / "samplescale_quick.json").read_text())
    seconds = data["pilots"]["seconds"]
    assert set(seconds) == {"numpy floor", "auto", "conditional", "conditional_is", "crude",
                            "auto over HTTP"}
    assert all(s > 0 for s in seconds.values()), seconds
    rows = data["sharing"]["rows"]
    assert [r["threshold"] for r in rows] == samplescale.TWENTY
    # conditional estimators hit every threshold: each has a finite relative error both ways.
    assert all(math.isfinite(r["shared_relative_error"]) and
               math.isfinite(r["alone_relative_error"]) for r in rows), rows
