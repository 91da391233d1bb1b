"""The ``tailgauge`` command: ``tailgauge serve`` (and, later, ``tailgauge run``)."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from pydantic import ValidationError

from service.settings import Settings

NOT_YET = 2  # exit status of a subcommand that exists in the interface but not yet in code


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
    run = commands.add_parser("run", help="run a batch file without a server (not yet available)")
    run.add_argument("batch", type=Path, metavar="BATCH.json")
    run.add_argument("--out", type=Path, required=True, metavar="RESULTS.json")
    return parser


def _serve(args: argparse.Namespace) -> int:
    import uvicorn

    from service.app import create_app

    given = {"host": args.host, "port": args.port, "data_dir": args.data_dir,
             "workers": args.workers}
    try:
        settings = Settings(**{k: v for k, v in given.items() if v is not None})
    except ValidationError as exc:
        print(f"tailgauge serve: invalid settings:\n{exc}", file=sys.stderr)
        return 2
    uvicorn.run(create_app(settings), host=settings.host, port=settings.port)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command == "serve":
        return _serve(args)
    print("tailgauge run: not yet available", file=sys.stderr)
    return NOT_YET


if __name__ == "__main__":
    sys.exit(main())
