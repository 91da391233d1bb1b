"""Fixtures of the client tests: one real server per session, a fault proxy per test."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from client_harness import FaultProxy, Served, start_server, stop_server


@pytest.fixture(scope="session")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Served]:
    tmp = tmp_path_factory.mktemp("client_server")
    served = start_server(tmp / "data", tmp / "server.log")
    yield served
    stop_server(served)


@pytest.fixture
def proxy(server: Served) -> Iterator[FaultProxy]:
    port = int(server.base_url.rsplit(":", 1)[1])
    relay = FaultProxy(upstream_port=port)
    relay.start()
    yield relay
    relay.stop()
