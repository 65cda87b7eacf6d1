import pytest

pytestmark = pytest.mark.db


def test_fixtures_wire_up(client, admin_headers, make_tank, make_device):
    tank = make_tank()
    device, key = make_device()
    assert key.startswith("spl_")
    assert device.id.startswith("dev_")
    assert tank.source_station.site_id == tank.site_id
    response = client.get("/healthz")
    assert response.json() == {"status": "ok", "database": "ok"}
