"""The app factory: nothing connects at import or creation, /healthz reports the database,
the docs carry the caution, oversized bodies are refused."""

from __future__ import annotations

import httpx
import pytest
from anyio.from_thread import start_blocking_portal

from app.main import CAUTION, create_app


def _client(app, portal):
    from tests.conftest import _PortalASGITransport

    return httpx.Client(transport=_PortalASGITransport(app, portal), base_url="http://t")


@pytest.mark.db
def test_healthz_says_the_database_answers(client):
    response = client.get("/healthz")
    assert response.status_code == 200
    assert response.json() == {"status": "ok", "database": "ok"}


def test_healthz_reports_an_unreachable_database(settings):
    # Port 1 on localhost refuses at once; creating the app must not have tried to connect.
    broken = settings.model_copy(
        update={"database_url": "postgresql+psycopg://nobody@127.0.0.1:1/none"}
    )
    app = create_app(broken)
    with start_blocking_portal() as portal, _client(app, portal) as http:
        response = http.get("/healthz")
    assert response.status_code == 503
    assert response.json() == {"status": "error", "database": "unreachable"}


def test_openapi_carries_the_caution(settings):
    app = create_app(settings)
    description = app.openapi()["info"]["description"]
    assert CAUTION in description
    for words in ("do not replace", "operator's judgement", "local regulations", "licensed"):
        assert words in description


def test_every_api_route_is_versioned(settings):
    app = create_app(settings)
    api_paths = list(app.openapi()["paths"])
    assert "/healthz" in api_paths
    assert all(p == "/healthz" or p.startswith("/api/v1/") for p in api_paths), api_paths


@pytest.mark.db
def test_oversized_body_is_413(settings, engine):
    small = settings.model_copy(update={"body_limit_bytes": 1024})
    app = create_app(small, engine=engine)
    with start_blocking_portal() as portal, _client(app, portal) as http:
        declared = http.post("/api/v1/sites", content=b"{" + b" " * 4096 + b"}")
        assert declared.status_code == 413
        assert "1024 bytes" in declared.json()["detail"]

        def chunks():
            yield b"{"
            yield b" " * 4096
            yield b"}"

        streamed = http.post(
            "/api/v1/sites", content=chunks(), headers={"Content-Type": "application/json"}
        )
        assert streamed.status_code == 413
