"""The manager's web pages: server-rendered, readable without JavaScript, no external assets."""

from __future__ import annotations

from pathlib import Path

from fastapi import FastAPI
from fastapi.staticfiles import StaticFiles
from starlette.middleware.sessions import SessionMiddleware

from app.settings import Settings

STATIC_DIR = Path(__file__).resolve().parent.parent / "static"
SESSION_COOKIE = "spatline_session"
SESSION_MAX_AGE_S = 12 * 3600  # one working shift (design default)


def install(app: FastAPI, settings: Settings) -> None:
    """Add the signed session cookie, the static files and the page routes to ``app``."""
    from app.web.router import router

    app.add_middleware(
        SessionMiddleware,
        secret_key=settings.secret_key.get_secret_value(),
        session_cookie=SESSION_COOKIE,
        max_age=SESSION_MAX_AGE_S,
        same_site="lax",
        https_only=settings.public_url.startswith("https://"),
    )
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    app.include_router(router)
