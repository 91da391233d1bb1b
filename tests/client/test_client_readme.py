"""The README's pipeline example runs as written against a served instance."""

from __future__ import annotations

import os
import re
import subprocess
import sys

from client_harness import REPO, Served


def _example() -> str:
    text = (REPO / "README.md").read_text()
    match = re.search(r"<!-- pipeline-example -->\n```python\n(.*?)```", text, re.S)
    assert match, "README.md lost its pipeline example"
    return match.group(1)


def test_readme_pipeline_example_runs_as_written(server: Served) -> None:
    done = subprocess.run(
        [sys.executable, "-c", _example()], capture_output=True, text=True, timeout=300,
        env={**os.environ, "TAILGAUGE_URL": server.base_url}, cwd=REPO,
    )
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    assert lines[0].startswith("0.990  VaR") and lines[1].startswith("0.995  VaR")
    assert lines[2].startswith("done [(5000000.0, ")
