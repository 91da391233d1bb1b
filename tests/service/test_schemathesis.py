"""schemathesis against the app's own OpenAPI document (issue 13), in process.

Every operation of the document gets schemathesis's phases: the document's examples, the
positive boundary-value coverage phase (each field at its limits, every enum member, every
optional field present and absent), then random fuzzing with valid and invalid data (the
invalid side of the boundaries). The chart and fit routes skip the coverage phase: their bodies
are the other routes' (already covered) plus a few query parameters, and the fit's coverage
cases all refit the example's claims (seconds each). Bounded: about 1,100 cases. The seed is
fixed and Hypothesis derandomized, so a run is the same run every time. Each answer must be
no 5xx, carry a status code the document lists for the operation and a content type it lists,
and conform to the documented schema.

The app runs with small server limits so that every generated computation is cheap (a few
thousand samples, a short time limit, few thresholds, lines and claims) and a data dir of its
own. Half of the generated run ids are replaced by those of two runs submitted first, so the
run-scoped routes answer real runs (200, 409), not only 404.
"""

from __future__ import annotations

import collections
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import hypothesis
import pytest
import schemathesis
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)
from schemathesis.python import asgi

from service.app import create_app
from service.settings import Settings

SEED = 20261202
# Random (fuzzing-phase) cases per operation; the examples and coverage phases add theirs.
FUZZ_EXAMPLES = 20
MIN_CASES = 1000
CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
          response_schema_conformance]

SETTINGS = Settings(
    data_dir=Path(tempfile.mkdtemp(prefix="tailgauge-schemathesis-")),
    executor="thread",
    workers=2,
    max_samples=5000,
    time_limit_s=0.5,
    # Set-up work before the first sample (pilots, moments of layered laws) is not cut by the
    # time limit; a generous backstop, so that a 503 means a computation ignoring its limit.
    time_limit_grace_s=15.0,
    max_thresholds=4,
    max_lines=4,
    max_obligor_groups=3,
    max_obligors=200,
    max_expected_claims=50,
    max_run_items=3,
    max_body_bytes=64 * 1024,
    run_workers=1,
    run_max_attempts=1,
)
app = create_app(SETTINGS)

config = schemathesis.Config.from_dict({
    "seed": SEED,
    "request-timeout": 60,
    "generation": {"deterministic": True, "max-examples": FUZZ_EXAMPLES, "database": "none"},
    "phases": {"stateful": {"enabled": False},
               "coverage": {"generation": {"mode": "positive"}}},
    "operations": [{"include-path-regex": "(/chart|/fit)$",
                    "phases": {"coverage": {"enabled": False}}}],
})
schema = schemathesis.openapi.from_asgi("/openapi.json", app, config=config)

CASES: collections.Counter[str] = collections.Counter()
STATUSES: collections.Counter[str] = collections.Counter()
RUNS: dict[str, Any] = {}
_LINE = {"count": {"kind": "poisson", "mean": 2.0},
         "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.0}}
_ITEM = {"portfolio": {"lines": [_LINE]}, "precision": {"samples": 200}, "seed": 3}


def _submit(name: str, kind: str, request: dict[str, Any]) -> str:
    case = schema["/v1/runs"]["POST"].Case(
        body={"name": name, "items": [{"id": "a", "kind": kind, "request": request}]})
    response = case.call()
    assert response.status_code == 202, response.text
    return str(response.json()["run_id"])


@pytest.fixture(scope="module", autouse=True)
def _runs() -> Iterator[None]:
    # schemathesis starts the app's lifespan (compute pool, run worker, data-dir lock) on its
    # own event loop at the first call; it is stopped with the module, not at exit.
    RUNS["done"] = _submit("done", "exceedance", {**_ITEM, "thresholds": [5.0]})
    RUNS["layers"] = _submit("layers", "layers",
                             {**_ITEM, "layers": [{"attachment": 1.0, "limit": 5.0}]})
    for run_id in RUNS.values():
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            status = schema["/v1/runs/{run_id}"]["GET"].Case(
                path_parameters={"run_id": run_id}).call().json()["status"]
            if status == "done":
                break
            time.sleep(0.05)
    yield
    asgi.shutdown_lifespans()
    print(f"\nschemathesis: {sum(CASES.values())} cases", dict(STATUSES), dict(CASES))


def _real_ids(case: schemathesis.Case) -> None:
    """Every second case of a run-scoped route asks about a real run (and item)."""
    params = case.path_parameters
    if params and "run_id" in params and CASES[case.operation.label] % 2 == 0:
        params["run_id"] = RUNS["done" if CASES[case.operation.label] % 4 else "layers"]
        if "item_id" in params:
            params["item_id"] = "a"


@schema.parametrize()
@hypothesis.settings(deadline=None, suppress_health_check=list(hypothesis.HealthCheck))
def test_every_answer_is_documented_and_never_5xx(case: schemathesis.Case) -> None:
    CASES[case.operation.label] += 1
    _real_ids(case)
    response = case.call()
    STATUSES[f"{response.status_code // 100}xx"] += 1
    case.validate_response(response, checks=CHECKS)


def test_the_run_covered_every_operation_with_at_least_1000_cases() -> None:
    # Runs after the parametrized test above (pytest keeps file order): the bound of the
    # issue, over the operations of the document, and no server error among them.
    labels = {op.ok().label for op in schema.get_all_operations()}
    assert set(CASES) == labels
    assert sum(CASES.values()) >= MIN_CASES
    assert STATUSES["5xx"] == 0
