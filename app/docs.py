"""The interactive API page at /docs, served entirely from this service.

A hatchery computer is often offline, so the Swagger UI script, style sheet and icon come
from the files the ``swagger-ui-py`` package ships (its ``static`` folder, Swagger UI 5,
which reads OpenAPI 3.1), mounted at ``/docs-assets``; the page names no other host. The
separate ReDoc page, which has no locally installable assets here, is not offered.
"""

from __future__ import annotations

from pathlib import Path

from fastapi import FastAPI, Request
from fastapi.openapi.docs import get_swagger_ui_html, get_swagger_ui_oauth2_redirect_html
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles

DOCS_PATH = "/docs"
ASSETS_PATH = "/docs-assets"


def swagger_ui_dir() -> Path:
    import swagger_ui

    return Path(swagger_ui.__file__).resolve().parent / "static"


def install(app: FastAPI) -> None:
    """Add /docs (and its OAuth2 redirect helper) with locally served assets to ``app``.

    The app must be built with ``docs_url=None`` and ``redoc_url=None``.
    """
    app.mount(ASSETS_PATH, StaticFiles(directory=swagger_ui_dir()), name="docs-assets")
    openapi_url = app.openapi_url or "/openapi.json"
    redirect_url = f"{DOCS_PATH}/oauth2-redirect"

    # Plain routes, like FastAPI's own docs routes: they show the schema, not data.
    async def swagger_page(_request: Request) -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=openapi_url,
            title=f"{app.title} API",
            swagger_js_url=f"{ASSETS_PATH}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSETS_PATH}/swagger-ui.css",
            swagger_favicon_url=f"{ASSETS_PATH}/favicon-32x32.png",
            oauth2_redirect_url=redirect_url,
        )

    async def swagger_redirect(_request: Request) -> HTMLResponse:
        return get_swagger_ui_oauth2_redirect_html()

    app.add_route(DOCS_PATH, swagger_page, methods=["GET"], include_in_schema=False)
    app.add_route(redirect_url, swagger_redirect, methods=["GET"], include_in_schema=False)
