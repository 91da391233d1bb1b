"""The benchmark runs end to end on a tiny budget (its numbers are not checked here)."""

import json

from bench import credit, run, service


def test_bench_runs_on_a_tiny_budget(capsys):
    assert run.main(["--quick"]) == 0
    printed = capsys.readouterr().out
    assert "Hard regime" in printed
    data = json.loads((run.OUT / "results.json").read_text())
    assert len(data["hard_regime"]) == 12


def test_service_bench_runs_on_a_tiny_budget(capsys):
    assert service.main(["--quick"]) == 0
    assert "Service overhead" in capsys.readouterr().out
    data = json.loads((service.OUT / "service_quick.json").read_text())
    assert data["throughput"]["failed"] == 0 and data["overhead"]["ratio"] > 0


def test_report_bench_runs_on_a_tiny_budget(capsys, monkeypatch):
    from bench import report

    monkeypatch.setenv("TAILGAUGE_EXECUTOR", "thread")
    assert report.main(["--quick"]) == 0
    assert "Run report of the month-end batch" in capsys.readouterr().out
    data = json.loads((report.OUT / "report_quick.json").read_text())
    assert data["bytes"] > 50_000 and len(data["report_cpu_s"]) == 1


def test_credit_bench_runs_on_a_tiny_budget(capsys):
    assert credit.main(["--quick"]) == 0
    printed = capsys.readouterr().out
    assert "Glasserman-Li" in printed and "Cost:" in printed
