"""/docs works on a computer without internet: the page and everything it loads come from
this service (Swagger UI's files shipped by the swagger-ui-py package)."""

from __future__ import annotations

import re

import pytest

pytestmark = pytest.mark.db


def test_docs_page_names_no_other_host_and_its_assets_are_served(client):
    page = client.get("/docs")
    assert page.status_code == 200
    assert "SwaggerUIBundle" in page.text
    # Every src/href/url in the page is a path on this service, never another host.
    for reference in re.findall(r"""(?:src|href|url)\s*[=:]\s*['"]([^'"]+)['"]""", page.text):
        assert not re.match(r"^(https?:)?//", reference), reference
    assert not re.search(r"https?://", page.text), "the page names an outside host"
    assets = re.findall(r"""['"](/docs-assets/[^'"]+)['"]""", page.text)
    assert {a.rsplit("/", 1)[1] for a in assets} >= {"swagger-ui-bundle.js", "swagger-ui.css"}
    for asset in assets:
        served = client.get(asset)
        assert served.status_code == 200, asset
        assert len(served.content) > 1000, asset
    # The bundle is Swagger UI 5, which reads the OpenAPI 3.1 schema FastAPI writes.
    bundle = client.get("/docs-assets/swagger-ui-bundle.js").text
    assert re.search(r'"5\.\d+\.\d+"', bundle)
    assert client.get("/openapi.json").json()["openapi"].startswith("3.1")


def test_no_page_loads_from_a_cdn(client):
    assert client.get("/redoc").status_code == 404  # it would need a CDN; not offered
