"""The estimator panel (python -m bench.panel) runs end to end on a tiny budget and writes its
tables, JSON and plots. Its numbers are measurements and are not checked here."""

import json

from bench import panel


def test_panel_runs_on_a_tiny_budget_and_writes_tables_json_and_plots(tmp_path, capsys):
    assert panel.main(["--quick", "--out", str(tmp_path)]) == 0
    printed = capsys.readouterr().out
    assert "Work-normalised variance against crude" in printed
    assert (tmp_path / "panel.md").read_text() in printed
    data = json.loads((tmp_path / "panel.json").read_text())
    rows = data["rows"]
    assert [r["case"] for r in rows] == [k for k in panel.QUICK.cases for _ in range(3)]
    for row in rows:
        case = next(c for c in panel.CASES if c.key == row["case"])
        assert sorted(row["runs"]) == sorted(panel.methods_for(case.portfolio))
        assert row["runs"]["auto"]["used"]  # auto says which estimator it chose
        assert row["reference"]["lower"] <= row["reference"]["upper"]
    assert data["machine"]["nproc"] >= 1
    for name in ("tail", "efficiency", "cost_samples", "cost_claims"):
        assert (tmp_path / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_crude_without_hits_gets_the_rule_of_three_bound():
    # P <= 3/n at 95% (the rule of three), so crude's relative variance per sample
    # (1 - p)/p is at least (1 - q)/q with q the reported one-sided bound
    run = panel.Run(method="crude", hits=0, ci_high=3e-5, seconds=2.0)
    value, is_bound = panel.wnv(run, samples=100_000)
    assert is_bound
    assert value == (1 - 3e-5) / 3e-5 * 2.0 / 100_000
