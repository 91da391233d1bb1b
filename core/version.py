"""The engine version: one source, pyproject.toml (the package metadata carries it once built).

Figures for a fixed request and seed change only together with this version (tests/golden).
A source tree (a checkout, or an editable install, whose metadata keeps the version of the day it
was installed) reads pyproject.toml beside the package, so a bump takes effect without a
reinstall; an installed wheel has no pyproject.toml and reads its metadata. The fallback serves a
tree with neither; a test keeps it equal to pyproject.toml.
"""

from __future__ import annotations

import tomllib
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

FALLBACK_VERSION = "0.5.0"
_PYPROJECT = Path(__file__).resolve().parents[1] / "pyproject.toml"


def _declared() -> str | None:
    try:
        project = tomllib.loads(_PYPROJECT.read_text(encoding="utf-8")).get("project", {})
    except (OSError, tomllib.TOMLDecodeError):
        return None
    declared = project.get("version") if project.get("name") == "tailgauge" else None
    return declared if isinstance(declared, str) else None


def engine_version() -> str:
    declared = _declared()
    if declared is not None:
        return declared
    try:
        return version("tailgauge")
    except PackageNotFoundError:
        return FALLBACK_VERSION


ENGINE_VERSION = engine_version()
