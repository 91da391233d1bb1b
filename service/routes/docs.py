"""API docs that work offline: Swagger UI at /docs and ReDoc at /redoc, their scripts and
stylesheet served by the app itself from the ``fastapi-offline`` package (MIT; it ships the
Swagger UI 5 bundle, Apache-2.0, and the ReDoc 2 standalone bundle, MIT). FastAPI's own docs
pages load these files from a public CDN, so without internet they stay blank.
"""

# No "from __future__ import annotations": FastAPI must see the endpoint annotations.

from importlib import resources

from fastapi import APIRouter, HTTPException
from fastapi.openapi.docs import (
    get_redoc_html,
    get_swagger_ui_html,
    get_swagger_ui_oauth2_redirect_html,
)
from fastapi.responses import HTMLResponse, Response

from service.errors import detail_entry

ASSET_PREFIX = "/docs-assets"
ASSETS = frozenset({"swagger-ui-bundle.js", "swagger-ui.css", "redoc.standalone.js",
                    "favicon.png"})
MEDIA = {".js": "text/javascript; charset=utf-8", ".css": "text/css; charset=utf-8",
         ".png": "image/png"}
# The validator badge would fetch an image from a public validator service.
SWAGGER_PARAMETERS = {"validatorUrl": None}


# ReDoc's sidebar draws a logo fetched from its vendor's CDN (unconditionally, in the shipped
# bundle): point it at our own favicon, so the page asks nothing of the outside network.
_REDOC_LOGO = b"https://cdn.redoc.ly/redoc/logo-mini.svg"


def asset_bytes(name: str) -> bytes:
    data = resources.files("fastapi_offline").joinpath("static", name).read_bytes()
    if name == "redoc.standalone.js":
        data = data.replace(_REDOC_LOGO, f"{ASSET_PREFIX}/favicon.png".encode())
    return data


def build_router(*, title: str, openapi_url: str) -> APIRouter:
    router = APIRouter(include_in_schema=False)
    oauth2_redirect = "/docs/oauth2-redirect"

    @router.get("/docs")
    async def swagger_ui() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=openapi_url, title=f"{title}: API docs",
            oauth2_redirect_url=oauth2_redirect,
            swagger_js_url=f"{ASSET_PREFIX}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSET_PREFIX}/swagger-ui.css",
            swagger_favicon_url=f"{ASSET_PREFIX}/favicon.png",
            swagger_ui_parameters=SWAGGER_PARAMETERS,
        )

    @router.get(oauth2_redirect)
    async def swagger_ui_redirect() -> HTMLResponse:
        return get_swagger_ui_oauth2_redirect_html()

    @router.get("/redoc")
    async def redoc() -> HTMLResponse:
        return get_redoc_html(
            openapi_url=openapi_url, title=f"{title}: API reference",
            redoc_js_url=f"{ASSET_PREFIX}/redoc.standalone.js",
            redoc_favicon_url=f"{ASSET_PREFIX}/favicon.png", with_google_fonts=False,
        )

    @router.get(ASSET_PREFIX + "/{name}")
    async def docs_asset(name: str) -> Response:
        if name not in ASSETS:
            raise HTTPException(404, detail=[detail_entry(
                ["path", "name"], f"no docs asset '{name}'", "not_found")])
        suffix = name[name.rfind("."):]
        return Response(asset_bytes(name), media_type=MEDIA[suffix],
                        headers={"Cache-Control": "public, max-age=86400"})

    return router
