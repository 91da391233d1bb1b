"""The run report: one self-contained HTML page per run that a risk committee can read.

``build_report(run, batch)`` is a pure function of the run's view (the body of GET
/v1/runs/{run_id}) and its stored batch. The page has no external assets: the stylesheet is
inlined, every chart is inline SVG, there is no script, and a Content-Security-Policy meta
tag forbids loading anything, so it reads the same offline, from a file or from the server.
"""

from __future__ import annotations

from service.report.page import build_report

__all__ = ["build_report"]
