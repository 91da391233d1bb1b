"""The ``tailgauge`` command: ``tailgauge serve`` and ``tailgauge run``."""

from __future__ import annotations

import argparse
import asyncio
import json
import math
import sys
import time
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

from pydantic import ValidationError

from service.results_file import OutputError, ResultsFile
from service.settings import Settings

if TYPE_CHECKING:
    from service.schemas.runs import RunBatchIn, RunOut
    from service.store import ItemRecord, RunRecord

# Exit status of tailgauge run: every item done / some item failed / nothing could be run.
RUN_OK, RUN_ITEM_FAILED, RUN_UNUSABLE = 0, 1, 2
BAR_WIDTH = 30


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tailgauge", description="Tail-risk figures of portfolio loss models."
    )
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    serve = commands.add_parser("serve", help="run the HTTP service")
    serve.add_argument("--host", help="interface to listen on (default 127.0.0.1)")
    serve.add_argument("--port", type=int, help="TCP port (default 8000)")
    serve.add_argument("--data-dir", type=Path, help="directory for the service's files")
    serve.add_argument("--workers", type=int, help="size of the computation pool")
    _executor_flags(serve)
    run = commands.add_parser(
        "run", help="run a batch file (the body of POST /v1/runs) without a server",
        description="Exit status: 0 every item done, 1 some item failed (the others are in "
        "the output), 2 the batch could not be read or is malformed, or --out cannot be "
        "written (checked before any work). --out is replaced atomically (a temporary file "
        "renamed over it; through a symlink, the file it points to); a device or FIFO is "
        "written in place.",
    )
    run.add_argument("batch", type=Path, metavar="BATCH.json")
    run.add_argument("--out", type=Path, required=True, metavar="RESULTS.json",
                     help="where to write the results (the body of GET /v1/runs/{run_id})")
    run.add_argument("--report", type=Path, metavar="REPORT.html",
                     help="also write the run report: one self-contained HTML page")
    run.add_argument("--workers", type=int, help="size of the computation pool")
    _executor_flags(run)
    return parser


def _executor_flags(command: argparse.ArgumentParser) -> None:
    command.add_argument("--executor", choices=("process", "thread", "dask"),
                         help="kind of computation pool (default process)")
    command.add_argument("--dask-scheduler", metavar="ADDRESS",
                         help="Dask scheduler address for --executor dask "
                         "(e.g. tcp://10.0.0.5:8786)")


def _serve(args: argparse.Namespace) -> int:
    import uvicorn

    from service import datadir
    from service.app import create_app
    from service.auth import AuthConfigError, load_auth

    given = {"host": args.host, "port": args.port, "data_dir": args.data_dir,
             "workers": args.workers, "executor": args.executor,
             "dask_scheduler": args.dask_scheduler}
    try:
        settings = Settings(**{k: v for k, v in given.items() if v is not None})
    except ValidationError as exc:
        print(f"tailgauge serve: invalid settings:\n{exc}", file=sys.stderr)
        return 2
    # Every start-up problem is one line and exit 2, before the server listens.
    try:
        load_auth(settings)
        lock = datadir.check(settings)  # held while the server runs: one server per data dir
    except (AuthConfigError, datadir.DataDirError) as exc:
        print(f"tailgauge serve: {exc}", file=sys.stderr)
        return 2
    try:
        uvicorn.run(create_app(settings, exit_on_start_failure=True), host=settings.host,
                    port=settings.port)
    finally:
        lock.release()
    return 0


def _where(loc: Sequence[Any]) -> str:
    return ".".join(str(part) for part in loc) or "batch"


class ProgressReport:
    """Progress of a batch on ``stream``: a one-line bar redrawn with \\r on a terminal, one
    plain line per finished item otherwise (cron mail, log files)."""

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self.bar = stream.isatty()
        self.started = time.monotonic()
        self.failures: list[str] = []

    def start(self, run: RunRecord) -> None:
        if not self.bar:
            self._line(f"run '{run.name}': {run.progress.total} items")
        self._draw(run)

    def item(self, item: ItemRecord, run: RunRecord) -> None:
        p = run.progress
        note = f"{item.item_id} ({item.kind}) {item.status}"
        if item.error:
            first = item.error[0]
            note += f": {_where(first['loc'])}: {first['msg']}"
            self.failures.append(note)
        if self.bar:
            self._draw(run)
        else:
            self._line(f"[{p.finished}/{p.total}] {note}")

    def finish(self, view: RunOut, out: Path) -> None:
        p = view.progress
        if self.bar:
            self.stream.write("\n")
            for failure in self.failures:
                self._line(f"failed: {failure}")
        self._line(f"{view.status}: {p.done - p.failed} done, {p.failed} failed of {p.total} in "
                   f"{time.monotonic() - self.started:.1f} s; results in {out}")

    def _draw(self, run: RunRecord) -> None:
        if not self.bar:
            return
        p = run.progress
        filled = BAR_WIDTH * p.finished // max(p.total, 1)
        bar = "#" * filled + "-" * (BAR_WIDTH - filled)
        failed = f", {p.failed} failed" if p.failed else ""
        self.stream.write(f"\r[{bar}] {p.finished}/{p.total}{failed} "
                          f"{time.monotonic() - self.started:5.0f} s")
        self.stream.flush()

    def _line(self, text: str) -> None:
        print(f"tailgauge run: {text}", file=self.stream, flush=True)


class _NonFinite(str):
    """A number JSON gave that no double holds (NaN, Infinity, 1e999): its literal text."""


def _parse_float(text: str) -> float | _NonFinite:
    value = float(text)
    return value if math.isfinite(value) else _NonFinite(text)


def _parse_int(text: str) -> int | _NonFinite:
    value = int(text)
    return value if abs(value) <= sys.float_info.max else _NonFinite(text)


def _non_finite(value: Any, loc: tuple[str | int, ...] = ()) -> Iterator[
        tuple[tuple[str | int, ...], str]]:
    if isinstance(value, _NonFinite):
        yield loc, str(value)
    elif isinstance(value, dict):
        for key, child in value.items():
            yield from _non_finite(child, (*loc, key))
    elif isinstance(value, list):
        for index, child in enumerate(value):
            yield from _non_finite(child, (*loc, index))


def _finite_problems(body: Any) -> list[dict[str, Any]]:
    """Every non-finite number of the batch, named by item and field."""
    problems = []
    for loc, literal in _non_finite(body):
        where = _where(loc)
        items = body.get("items") if isinstance(body, dict) else None
        if len(loc) >= 2 and loc[0] == "items" and isinstance(items, list):
            item = items[int(loc[1])]
            item_id = item.get("id") if isinstance(item, dict) else None
            if isinstance(item_id, str):
                where = f"item '{item_id}' (items[{loc[1]}]): {_where(loc[2:])}"
        problems.append({"loc": [where], "msg": f"{literal} is not a finite number (NaN, "
                         "Infinity and magnitudes beyond 1.8e308 are refused)"})
    return problems


def _read_batch(path: Path, stream: TextIO) -> RunBatchIn | None:
    from service.schemas.runs import RunBatchIn

    try:
        body = json.loads(path.read_text(encoding="utf-8"), parse_float=_parse_float,
                          parse_int=_parse_int, parse_constant=_NonFinite)
    except OSError as exc:
        print(f"tailgauge run: cannot read {path}: {exc.strerror}", file=stream)
        return None
    except ValueError as exc:  # not JSON, or not UTF-8
        print(f"tailgauge run: {path} is not a JSON file: {exc}", file=stream)
        return None
    if problems := _finite_problems(body):
        _rejected(path, problems, stream)
        return None
    try:
        return RunBatchIn.model_validate(body)
    except ValidationError as exc:
        _rejected(path, [{"loc": e["loc"], "msg": e["msg"]} for e in exc.errors()], stream)
        return None


def _rejected(path: Path, detail: list[dict[str, Any]], stream: TextIO) -> None:
    print(f"tailgauge run: {path} is not a valid batch:", file=stream)
    for entry in detail:
        loc = [part for part in entry["loc"] if part != "body"]
        print(f"  {_where(loc)}: {entry['msg']}", file=stream)


async def run_batch_file(
    batch_path: Path, out_path: Path, *, settings: Settings, stream: TextIO,
    report_path: Path | None = None,
) -> int:
    """``tailgauge run``: compute the batch, write the results, return the exit status."""
    from service.batches import BatchRejected
    from service.worker import run_locally

    batch = _read_batch(batch_path, stream)
    if batch is None:
        return RUN_UNUSABLE
    # Before any work: an unwritable --out (or --report) must not cost the run.
    try:
        out = ResultsFile.open(out_path)
    except OutputError as exc:
        print(f"tailgauge run: cannot write the results to {out_path}: {exc}; nothing was "
              "run", file=stream)
        return RUN_UNUSABLE
    report_out: ResultsFile | None = None
    if report_path is not None:
        try:
            report_out = ResultsFile.open(report_path)
        except OutputError as exc:
            out.discard()
            print(f"tailgauge run: cannot write the report to {report_path}: {exc}; nothing "
                  "was run", file=stream)
            return RUN_UNUSABLE
    report = ProgressReport(stream)
    try:
        view = await run_locally(batch, settings=settings, on_start=report.start,
                                 on_item=report.item)
    except BatchRejected as exc:
        out.discard()
        if report_out is not None:
            report_out.discard()
        _rejected(batch_path, exc.detail, stream)
        return RUN_UNUSABLE
    except BaseException:
        out.discard()
        if report_out is not None:
            report_out.discard()
        raise
    try:
        out.write(view.model_dump(mode="json"))
    except OutputError as exc:
        if report_out is not None:
            report_out.discard()
        print(f"tailgauge run: writing the results to {out_path} failed: {exc}", file=stream)
        return RUN_UNUSABLE
    if report_out is not None:
        from service.report import build_report

        try:
            report_out.write(build_report(view, batch))
        except OutputError as exc:
            print(f"tailgauge run: writing the report to {report_path} failed: {exc}",
                  file=stream)
            return RUN_UNUSABLE
    report.finish(view, out_path)
    return RUN_OK if view.status == "done" else RUN_ITEM_FAILED


def _run(args: argparse.Namespace) -> int:
    given = {"workers": args.workers, "executor": args.executor,
             "dask_scheduler": args.dask_scheduler}
    try:
        settings = Settings(**{k: v for k, v in given.items() if v is not None})
    except ValidationError as exc:
        print(f"tailgauge run: invalid settings:\n{exc}", file=sys.stderr)
        return RUN_UNUSABLE
    try:
        return asyncio.run(run_batch_file(args.batch, args.out, settings=settings,
                                          stream=sys.stderr, report_path=args.report))
    except KeyboardInterrupt:
        print("\ntailgauge run: interrupted; no results written", file=sys.stderr)
        return 130


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command == "serve":
        return _serve(args)
    return _run(args)


if __name__ == "__main__":
    sys.exit(main())
