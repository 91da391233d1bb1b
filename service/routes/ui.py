"""The browser page: GET /ui (and / redirects there), its script and stylesheet."""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations.

from importlib import resources

from fastapi import APIRouter, HTTPException
from fastapi.responses import RedirectResponse, Response

from service.errors import detail_entry

# Everything the page loads comes from this server; no inline script or style.
CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
       "connect-src 'self'; form-action 'self'; base-uri 'none'; frame-ancestors 'none'")
FILES = {"index.html": "text/html; charset=utf-8", "ui.js": "text/javascript; charset=utf-8",
         "ui.css": "text/css; charset=utf-8"}
ASSETS = frozenset({"ui.js", "ui.css"})


def _file(name: str) -> Response:
    body = resources.files("service.ui").joinpath(name).read_bytes()
    return Response(body, media_type=FILES[name],
                    headers={"Content-Security-Policy": CSP, "Cache-Control": "no-cache"})


def build_router() -> APIRouter:
    router = APIRouter(include_in_schema=False)

    @router.get("/")
    async def root() -> RedirectResponse:
        return RedirectResponse("/ui", status_code=307)

    @router.get("/ui")
    async def page() -> Response:
        return _file("index.html")

    @router.get("/ui/{name}")
    async def asset(name: str) -> Response:
        if name not in ASSETS:
            raise HTTPException(404, detail=[detail_entry(
                ["path", "name"], f"the page has no file '{name}'", "not_found")])
        return _file(name)

    return router
