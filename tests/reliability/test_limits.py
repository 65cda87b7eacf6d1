"""The per-device rate limit (token bucket) and the default body limit."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from app.limits import TokenBuckets
from app.main import create_app
from app.readings.models import Reading
from tests.conftest import _PortalASGITransport

pytestmark = pytest.mark.db


class FakeClock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


def test_bucket_grants_the_burst_then_one_per_interval():
    clock = FakeClock()
    buckets = TokenBuckets(rate_per_s=0.5, burst=3, clock=clock)
    assert [buckets.take("a") for _ in range(3)] == [0.0, 0.0, 0.0]
    assert buckets.take("a") == pytest.approx(2.0)  # one token every 2 s
    assert buckets.take("b") == 0.0  # another key has its own bucket
    clock.now += 1.0
    assert buckets.take("a") == pytest.approx(1.0)
    clock.now += 1.0
    assert buckets.take("a") == 0.0
    clock.now += 3600.0  # a long pause saves up no more than the burst
    assert [buckets.take("a") for _ in range(4)][-1] > 0


def test_bucket_forgets_only_full_buckets_when_full_of_keys():
    clock = FakeClock()
    buckets = TokenBuckets(rate_per_s=1.0, burst=2, clock=clock, max_keys=2)
    buckets.take("busy")
    buckets.take("busy")
    clock.now += 0.1
    buckets.take("idle")
    clock.now += 5.0  # "idle" is full again, "busy" too after 5 s: both forgettable
    buckets.take("busy")
    buckets.take("busy")
    buckets.take("new")
    assert buckets.take("busy") > 0  # the emptied bucket was kept


def test_bad_rate_settings_are_refused():
    with pytest.raises(ValueError, match="rate_per_s"):
        TokenBuckets(rate_per_s=0, burst=1)


@pytest.fixture
def limited_client(settings, engine, session, app):
    import httpx
    from anyio.from_thread import start_blocking_portal

    from app.db import get_session

    limited = create_app(
        settings.model_copy(update={"device_requests_per_minute": 6.0, "device_request_burst": 3}),
        engine=engine,
    )
    limited.dependency_overrides[get_session] = app.dependency_overrides[get_session]
    with (
        start_blocking_portal() as portal,
        httpx.Client(
            transport=_PortalASGITransport(limited, portal), base_url="http://testserver"
        ) as http,
    ):
        yield http


def test_a_device_over_its_rate_gets_429_with_retry_after(
    limited_client, session, make_station, make_device
):
    station = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    _, fast_key = make_device(station=station)
    _, calm_key = make_device(station=station)

    def post(key: str, minute: int):
        return limited_client.post(
            "/api/v1/readings",
            json={"observed_at": f"2026-03-01T08:{minute:02d}:00Z", "ph": 7.9, "ph_scale": "total"},
            headers={"Authorization": f"Bearer {key}"},
        )

    answers = [post(fast_key, minute) for minute in range(5)]
    assert [a.status_code for a in answers] == [200, 200, 200, 429, 429]
    refused = answers[3]
    assert 1 <= int(refused.headers["Retry-After"]) <= 10  # one request every 10 s
    assert "retry after" in refused.json()["detail"]
    assert "6 requests a minute" in refused.json()["detail"]
    # The refused readings were not stored; another device is not held back.
    assert post(calm_key, 30).status_code == 200
    stored = session.execute(
        select(func.count()).select_from(Reading).where(Reading.station_pk == station.pk)
    ).scalar_one()
    assert stored == 4


def test_default_body_limit_is_two_megabytes(client, make_device):
    _, key = make_device()
    body = b'{"readings": [], "pad": "' + b"x" * (2 * 1024 * 1024) + b'"}'
    response = client.post(
        "/api/v1/readings",
        content=body,
        headers={"Authorization": f"Bearer {key}", "Content-Type": "application/json"},
    )
    assert response.status_code == 413
    assert "2097152 bytes" in response.json()["detail"]
