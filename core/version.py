"""The engine version: one source, the package metadata (pyproject.toml declares it).

Figures for a fixed request and seed change only together with this version (tests/golden).
The fallback serves a source tree that was never installed; a test keeps it equal to
pyproject.toml. After a bump, reinstall (`pip install -e .`) so the metadata follows.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

FALLBACK_VERSION = "0.2.0"


def engine_version() -> str:
    try:
        return version("tailgauge")
    except PackageNotFoundError:
        return FALLBACK_VERSION


ENGINE_VERSION = engine_version()
