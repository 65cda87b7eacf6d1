"""The application factory. Nothing connects at import time."""

from __future__ import annotations

import gc
import importlib
import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

from fastapi import APIRouter, FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from sqlalchemy import Engine, text

from app.db import make_engine, make_sessionmaker, read_only_engine
from app.docs import install as install_docs_page
from app.errors import ERROR_RESPONSES, validation_error_handler
from app.limits import BodyLimitMiddleware, StrictJsonMiddleware
from app.logredact import install_key_redaction
from app.settings import Settings
from app.web import install as install_web_pages

logger = logging.getLogger(__name__)

API_PREFIX = "/api/v1"

# One line per domain: the module that defines ``router`` (paths relative to /api/v1).
ROUTER_MODULES: list[str] = [
    "app.sites.router",
    "app.readings.router",
    "app.alerts.router",
    "app.status.router",
    "app.samples.router",
    "app.batches.router",
]

CAUTION = (
    "**Caution.** The readings, derived chemistry, alerts and dose advice served here support, "
    "and do not replace, the operator's judgement, local regulations and licensed practice. "
    "Dissolve any chemical into a stock solution and add it in a mixed header tank, never "
    "straight into a larval tank; measure the result; follow the safety data sheet."
)

DESCRIPTION = f"""
Seawater carbonate chemistry for shellfish hatcheries: sensor readings with quality flags,
aragonite saturation and the rest of the CO2 system derived for every reading, and tank
advice.

Send `Authorization: Bearer <key>`. Roles: **admin** configures sites, stations, tanks and
devices; **viewer** reads; **device** posts readings for its own station only.

{CAUTION}
"""


def _health_router() -> APIRouter:
    router = APIRouter(tags=["health"])

    @router.get("/healthz", summary="Whether the service and its database answer")
    def healthz(request: Request) -> JSONResponse:
        try:
            with request.app.state.read_engine.connect() as connection:
                connection.execute(text("SELECT 1"))
        except Exception as error:  # any failure means "the database does not answer"
            logger.warning("health check: database did not answer: %s", type(error).__name__)
            return JSONResponse(
                status_code=503, content={"status": "error", "database": "unreachable"}
            )
        return JSONResponse(content={"status": "ok", "database": "ok"})

    return router


def create_app(settings: Settings | None = None, *, engine: Engine | None = None) -> FastAPI:
    """Build the app. ``engine`` lets tests share theirs; otherwise one is made from settings."""
    settings = settings or Settings()
    install_key_redaction()
    owns_engine = engine is None
    engine = engine if engine is not None else make_engine(settings)

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        # Everything loaded at start-up lives as long as the process: out of the
        # collector's way, a full collection no longer scans it mid-request (tens of ms).
        gc.freeze()
        yield
        if owns_engine:
            engine.dispose()

    app = FastAPI(
        title="Spatline",
        version=_version(),
        description=DESCRIPTION,
        lifespan=lifespan,
        docs_url=None,  # app.docs serves /docs with local assets (no CDN)
        redoc_url=None,
    )
    app.state.settings = settings
    app.state.engine = engine
    app.state.read_engine = read_only_engine(engine)
    app.state.sessionmaker = make_sessionmaker(engine)
    app.state.read_sessionmaker = make_sessionmaker(app.state.read_engine)

    # Added last is outermost: the size limit counts raw bytes before the JSON check reads them.
    app.add_middleware(StrictJsonMiddleware, path_prefix=API_PREFIX)
    app.add_middleware(BodyLimitMiddleware, limit=settings.body_limit_bytes)
    app.add_exception_handler(RequestValidationError, validation_error_handler)
    app.include_router(_health_router())
    for module_name in ROUTER_MODULES:
        module = importlib.import_module(module_name)
        app.include_router(module.router, prefix=API_PREFIX, responses=ERROR_RESPONSES)
    install_web_pages(app, settings)
    install_docs_page(app)
    return app


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("spatline")
    except PackageNotFoundError:
        return "0.0.0"


__all__: list[Any] = ["API_PREFIX", "CAUTION", "ROUTER_MODULES", "create_app"]
