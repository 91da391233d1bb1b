"""How long the run report takes beyond the run itself: the month-end example batch.

    python -m bench.report            # 5 repetitions
    python -m bench.report --quick    # 1 repetition (the smoke test)

Prints the run's own time, then the report's wall and CPU time (CPU time is what the report
costs on a loaded machine; wall time is what a caller waits), and the time per chart kind.
Numbers are measurements, not pass/fail checks.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import statistics
import time
from collections import defaultdict
from collections.abc import Sequence
from pathlib import Path

from service import charts
from service.report import build_report
from service.resources import KINDS
from service.schemas.runs import RunBatchIn, RunItemDone, RunOut
from service.settings import DEFAULT_EXAMPLES_DIR, Settings
from service.worker import run_locally

OUT = Path(__file__).resolve().parent / "out"
EXAMPLE = DEFAULT_EXAMPLES_DIR / "runs_month_end.json"


def _table(title: str, header: list[str], rows: list[list[str]]) -> None:
    print(f"\n## {title}\n")
    print("| " + " | ".join(header) + " |")
    print("|" + "|".join("---" for _ in header) + "|")
    for row in rows:
        print("| " + " | ".join(row) + " |")


def _run(batch: RunBatchIn) -> tuple[RunOut, float]:
    settings = Settings(executor="thread", workers=2)
    started = time.perf_counter()
    view = asyncio.run(run_locally(batch, settings=settings, on_start=lambda _: None,
                                   on_item=lambda *_: None))
    return view, time.perf_counter() - started


def _report_times(view: RunOut, batch: RunBatchIn, repeats: int) -> tuple[list[float],
                                                                            list[float], int]:
    build_report(view, batch)  # first call: imports, font cache
    walls, cpus = [], []
    size = 0
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        size = len(build_report(view, batch).encode())
        walls.append(time.perf_counter() - wall)
        cpus.append(time.process_time() - cpu)
    return walls, cpus, size


def _chart_times(view: RunOut) -> dict[str, list[float]]:
    times: dict[str, list[float]] = defaultdict(list)
    for item in view.results:
        if not isinstance(item, RunItemDone):
            continue
        response = KINDS[item.kind].response.model_validate(item.result)
        for kind in charts.kinds_for(response):
            started = time.process_time()
            charts.render(kind, response, "svg")
            times[kind].append(time.process_time() - started)
    return times


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="one repetition")
    args = parser.parse_args(argv)
    repeats = 1 if args.quick else 5
    batch = RunBatchIn.model_validate(json.loads(EXAMPLE.read_text(encoding="utf-8")))
    view, run_s = _run(batch)
    walls, cpus, size = _report_times(view, batch, repeats)
    per_kind = _chart_times(view)
    load = os.getloadavg()[0]
    _table(f"Run report of the month-end batch ({len(view.results)} items, {repeats} "
           f"repetitions, load average {load:.1f} on {os.cpu_count()} cores)",
           ["what", "median", "max"],
           [["the run itself, wall (s)", f"{run_s:.2f}", f"{run_s:.2f}"],
            ["report, wall (s)", f"{statistics.median(walls):.2f}", f"{max(walls):.2f}"],
            ["report, CPU (s)", f"{statistics.median(cpus):.2f}", f"{max(cpus):.2f}"],
            ["report size (kB)", f"{size / 1000:.0f}", f"{size / 1000:.0f}"]])
    _table("SVG chart CPU time by kind (month-end batch)", ["kind", "charts", "mean (ms)"],
           [[kind, str(len(t)), f"{1000 * statistics.fmean(t):.0f}"]
            for kind, t in per_kind.items()])
    OUT.mkdir(exist_ok=True)
    name = "report_quick.json" if args.quick else "report.json"
    (OUT / name).write_text(json.dumps({
        "run_s": run_s, "report_wall_s": walls, "report_cpu_s": cpus, "bytes": size,
        "load_average": load, "chart_cpu_s": per_kind}, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
