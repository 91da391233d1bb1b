"""Fixtures for the service tests: apps on a thread pool (fast start), with tmp data dirs."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from service.app import create_app
from service.settings import Settings

MakeSettings = Callable[..., Settings]


@pytest.fixture
def make_settings(tmp_path: Path) -> MakeSettings:
    def make(**overrides: Any) -> Settings:
        values: dict[str, Any] = {
            "data_dir": tmp_path / "data",
            "executor": "thread",
            "workers": 2,
        }
        values.update(overrides)
        return Settings(**values)

    return make


@pytest.fixture
def make_client(make_settings: MakeSettings) -> Iterator[Callable[..., TestClient]]:
    """TestClients whose lifespan (pool start and stop) runs; closed at the end of the test."""
    clients: list[TestClient] = []

    def make(**overrides: Any) -> TestClient:
        client = TestClient(create_app(make_settings(**overrides)))
        client.__enter__()
        clients.append(client)
        return client

    yield make
    for client in clients:
        client.__exit__(None, None, None)


@pytest.fixture(scope="module")
def client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[TestClient]:
    settings = Settings(
        data_dir=tmp_path_factory.mktemp("data"), executor="thread", workers=2
    )
    app: FastAPI = create_app(settings)
    with TestClient(app) as test_client:
        yield test_client


def _small_request(**overrides: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "portfolio": {
            "lines": [
                {
                    "label": "test line",
                    "count": {"kind": "poisson", "mean": 2.0},
                    "severity": {"family": "lognormal", "mu": 0.0, "sigma": 1.0},
                }
            ]
        },
        "thresholds": [5.0, 20.0],
        "precision": {"samples": 2000},
        "seed": 12345,
    }
    body.update(overrides)
    return body


@pytest.fixture
def small_request() -> Callable[..., dict[str, Any]]:
    """Factory of a valid, quick request: one Poisson-lognormal line, 2000 samples."""
    return _small_request
