"""Known-value (golden) tests: fixed requests with fixed seeds, whose every figure is stored in
tests/golden/*.json (the numpy.random known-value pattern).

They guard "resubmit the stored batch, get the same figures": a refactor that reorders draws
changes these numbers and fails here. The stored figures change only together with the engine
version (core.ENGINE_VERSION, read from pyproject.toml; see core/version.py). After a
deliberate change of draws, bump the version in pyproject.toml and core/version.py, then
regenerate:

    python tests/golden/test_golden.py --regenerate

These are reproducibility checks, not accuracy checks: the accuracy of the same estimators is
tested against outside references in tests/reference.
"""

from __future__ import annotations

import dataclasses
import json
import math
import sys
import tomllib
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(ROOT))

from core import (  # noqa: E402
    Exponential,
    Fixed,
    Gamma,
    Line,
    Lognormal,
    Pareto,
    Poisson,
    Portfolio,
    Precision,
    SurplusProcess,
)
from core.exceedance import exceedance  # noqa: E402
from core.measures import Layer, tail_estimates  # noqa: E402
from core.ruin.api import ruin  # noqa: E402

# Reordered or extra draws move a Monte Carlo figure by about one standard error, far above this;
# 1e-9 leaves room for the last-digit round-off of the recursion's FFT, which differs between CPUs
# (seen: 1.3e-11 relative on a half-width, new machine, same numpy 2.4.6).
RTOL = 1e-9


def heavy() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Poisson(mean=5.0), severity=Lognormal(mu=0.0, sigma=1.5)),
        Line(count=Poisson(mean=20.0), severity=Gamma(shape=2.0, scale=1.0)),
    ])


def light() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Poisson(mean=10.0), severity=Gamma(shape=2.0, scale=1.0)),
        Line(count=Fixed(n=5), severity=Exponential(mean=2.0)),
    ])


def limited() -> Portfolio:
    return Portfolio(lines=[
        Line(count=Poisson(mean=3.0), severity=Pareto(alpha=2.5, scale=1.0), limit=40.0),
        Line(count=Poisson(mean=8.0), severity=Lognormal(mu=0.0, sigma=1.0)),
    ])


def samples(n: int) -> Precision:
    return Precision(samples=n)


LIGHT_RUIN = SurplusProcess(claim_rate=1.0, severity=Exponential(mean=1.0), loading=0.2)
HEAVY_RUIN = SurplusProcess(claim_rate=1.0, severity=Lognormal(mu=0.0, sigma=1.2), loading=0.3)
PARETO_RUIN = SurplusProcess(claim_rate=2.0, severity=Pareto(alpha=2.0, scale=1.0), loading=0.25)

CASES: dict[str, Callable[[], Any]] = {
    "exceedance_crude": lambda: exceedance(
        heavy(), [60.0, 90.0], method="crude", precision=samples(20_000), seed=101),
    "exceedance_conditional": lambda: exceedance(
        heavy(), [100.0, 300.0], method="conditional", precision=samples(8_000), seed=102),
    "exceedance_conditional_is": lambda: exceedance(
        heavy(), [100.0, 300.0], method="conditional_is", precision=samples(4_000), seed=103),
    "exceedance_tilted": lambda: exceedance(
        light(), [50.0, 70.0], method="tilted", precision=samples(4_000), seed=104),
    "exceedance_auto_heavy": lambda: exceedance(
        heavy(), [80.0, 400.0], precision=samples(4_000), seed=105),
    "exceedance_auto_light": lambda: exceedance(
        light(), [45.0, 65.0], precision=samples(4_000), seed=106),
    "exceedance_auto_limited_relative_error": lambda: exceedance(
        limited(), [60.0], precision=Precision(relative_error=0.05, max_samples=40_000),
        seed=107),
    "exceedance_no_hits": lambda: exceedance(
        light(), [150.0], method="crude", precision=samples(2_000), seed=109),
    "layers_no_hits": lambda: tail_estimates(
        light(), layers=[Layer(attachment=150.0, limit=10.0)], losses=[160.0], method="crude",
        precision=samples(2_000), seed=206),
    "exceedance_recursion": lambda: exceedance(
        light(), [50.0, 70.0], method="recursion", seed=108),
    "risk_measures_auto_heavy": lambda: tail_estimates(
        heavy(), levels=[0.99, 0.999], precision=samples(4_000), seed=201),
    "risk_measures_tilted": lambda: tail_estimates(
        light(), levels=[0.99, 0.999], method="tilted", precision=samples(4_000), seed=202),
    "layers_conditional_is": lambda: tail_estimates(
        heavy(), layers=[Layer(attachment=80.0, limit=100.0), Layer(attachment=200.0)],
        losses=[150.0], method="conditional_is", precision=samples(4_000), seed=203),
    "layers_crude": lambda: tail_estimates(
        light(), levels=[0.95], layers=[Layer(attachment=45.0, limit=10.0)], losses=[55.0],
        method="crude", precision=samples(10_000), seed=204),
    "risk_measures_recursion": lambda: tail_estimates(
        light(), levels=[0.99], layers=[Layer(attachment=45.0, limit=10.0)], losses=[55.0],
        method="recursion", seed=205),
    "ruin_siegmund": lambda: ruin(
        LIGHT_RUIN, [5.0, 20.0], precision=samples(2_000), seed=301),
    "ruin_siegmund_target": lambda: ruin(
        LIGHT_RUIN, [10.0], target_probability=1e-3, precision=samples(2_000), seed=302),
    "ruin_pollaczek_khinchine_auto": lambda: ruin(
        HEAVY_RUIN, [10.0, 50.0], precision=samples(4_000), seed=303),
    "ruin_pollaczek_khinchine_target": lambda: ruin(
        HEAVY_RUIN, [10.0], target_probability=1e-2, method="conditional",
        precision=samples(4_000), seed=304),
    "ruin_finite_horizon_tilted": lambda: ruin(
        LIGHT_RUIN, [5.0, 30.0], horizon=20.0, precision=samples(2_000), seed=305),
    "ruin_finite_horizon_conditional": lambda: ruin(
        PARETO_RUIN, [10.0, 40.0], horizon=5.0, precision=samples(4_000), seed=306),
    "ruin_finite_horizon_crude": lambda: ruin(
        LIGHT_RUIN, [2.0], horizon=10.0, method="crude", precision=samples(4_000), seed=307),
    "ruin_recursion": lambda: ruin(LIGHT_RUIN, [5.0, 20.0], method="recursion", seed=308),
}


def figures(result: Any) -> Any:
    """Every field of a result record, recursively, without the wall-clock time."""
    if dataclasses.is_dataclass(result) and not isinstance(result, type):
        return {f.name: figures(getattr(result, f.name)) for f in dataclasses.fields(result)
                if f.name != "elapsed_s"}
    if isinstance(result, list | tuple):
        return [figures(v) for v in result]
    return result


def declared_version() -> str:
    with open(ROOT / "pyproject.toml", "rb") as fh:
        return str(tomllib.load(fh)["project"]["version"])


def path_of(name: str) -> Path:
    return HERE / f"{name}.json"


def assert_same(got: Any, want: Any, where: str) -> None:
    if isinstance(want, float) and isinstance(got, float):
        same = (math.isnan(want) and math.isnan(got)) or math.isclose(
            got, want, rel_tol=RTOL, abs_tol=0.0)
        assert same, f"{where}: {got!r} != stored {want!r}"
    elif isinstance(want, dict):
        assert isinstance(got, dict) and got.keys() == want.keys(), f"{where}: keys differ"
        for k in want:
            assert_same(got[k], want[k], f"{where}.{k}")
    elif isinstance(want, list):
        assert isinstance(got, list) and len(got) == len(want), f"{where}: lengths differ"
        for i, (g, w) in enumerate(zip(got, want, strict=True)):
            assert_same(g, w, f"{where}[{i}]")
    else:
        assert got == want and type(got) is type(want), f"{where}: {got!r} != stored {want!r}"


def test_stored_figures_belong_to_the_declared_engine_version() -> None:
    from core import ENGINE_VERSION
    from core.version import FALLBACK_VERSION

    version = declared_version()
    assert FALLBACK_VERSION == version, "core/version.py and pyproject.toml disagree"
    # What responses carry: the declared version, even under an editable install whose
    # metadata was written before the bump.
    assert ENGINE_VERSION == version
    for name in CASES:
        stored = json.loads(path_of(name).read_text())
        assert stored["engine_version"] == version, (
            f"{name}.json was made by engine {stored['engine_version']}; regenerate the goldens "
            f"together with a version bump")


@pytest.mark.parametrize("name", sorted(CASES))
def test_fixed_request_reproduces_its_stored_figures(name: str) -> None:
    stored = json.loads(path_of(name).read_text())
    got = json.loads(json.dumps(figures(CASES[name]())))
    assert_same(got, stored["result"], name)


def regenerate() -> None:
    version = declared_version()
    for name, case in CASES.items():
        body = {"engine_version": version, "result": figures(case())}
        path_of(name).write_text(json.dumps(body, indent=1, sort_keys=True) + "\n")
        print(f"wrote {path_of(name).relative_to(ROOT)}")


if __name__ == "__main__":
    if sys.argv[1:] != ["--regenerate"]:
        sys.exit("usage: python tests/golden/test_golden.py --regenerate")
    regenerate()
