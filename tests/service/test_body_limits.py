"""Bodies over the size limit get 413 without being read into memory."""

from __future__ import annotations

import asyncio
import time
from collections.abc import AsyncIterator

import httpx

from service.app import create_app

TOO_LARGE = {
    "detail": [
        {
            "loc": ["body"],
            "msg": "request body is larger than 1048576 bytes",
            "type": "body_too_large",
        }
    ]
}


def test_declared_20_mb_body_gets_413(client):
    body = b'{"thresholds": [' + b"1.0," * (5 * 1024 * 1024) + b"1.0]}"
    assert len(body) > 20 * 1024 * 1024
    response = client.post(
        "/v1/exceedance", content=body, headers={"content-type": "application/json"}
    )
    assert response.status_code == 413
    assert response.json() == TOO_LARGE


def test_ten_million_thresholds_are_refused_quickly(client):
    body = b'{"thresholds": [' + b"1," * (10**7 - 1) + b"1]}"
    started = time.perf_counter()
    response = client.post(
        "/v1/exceedance", content=body, headers={"content-type": "application/json"}
    )
    assert response.status_code == 413
    assert time.perf_counter() - started < 2.0


def test_a_million_thresholds_under_a_raised_body_limit_get_422_not_500(make_client,
                                                                        small_request):
    big = make_client(max_body_bytes=64 * 1024 * 1024)
    started = time.perf_counter()
    response = big.post("/v1/exceedance", json=small_request(thresholds=[1.0] * 10**6))
    assert response.status_code == 422
    assert response.json()["detail"][0]["msg"] == (
        "holds 1000000 items; at most 1000 are allowed (server limit max_thresholds)"
    )
    assert time.perf_counter() - started < 10.0


def test_chunked_body_is_cut_off_once_past_the_limit(make_settings):
    # No Content-Length: the middleware must count the streamed bytes and stop reading.
    app = create_app(make_settings(max_body_bytes=64 * 1024))
    chunk = b"1.0," * 4096  # 16 KiB
    sent = 0

    async def stream() -> AsyncIterator[bytes]:
        nonlocal sent
        yield b'{"thresholds": ['
        for _ in range(1280):  # 20 MiB if fully read
            sent += 1
            yield chunk
        yield b"1.0]}"

    async def post() -> httpx.Response:
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://test") as client:
            return await client.post(
                "/v1/exceedance", content=stream(), headers={"content-type": "application/json"}
            )

    response = asyncio.run(post())
    assert response.status_code == 413
    assert response.json()["detail"][0]["type"] == "body_too_large"
    assert "content-length" not in {k.lower() for k in response.request.headers}
    # Read only past the 64 KiB limit, not the whole 20 MiB.
    assert sent <= 8
