"""Request limits: rate limit per key with Retry-After, body cap, literal storage."""
import pytest
from fastapi.testclient import TestClient

from service.api import create_app

from .conftest import make_keys, new_facility, record


class Clock:
    def __init__(self):
        self.t = 1000.0

    def __call__(self):
        return self.t


@pytest.fixture
def limited(settings):
    app = create_app(settings.with_overrides(rate_per_s=2.0, rate_burst=3.0))
    clock = Clock()
    app.state.buckets.clock = clock
    with TestClient(app) as client:
        yield client, make_keys(app.state.monitor.store), clock


def test_rate_limit_per_key_with_retry_after(limited):
    client, keys, clock = limited
    hdr = keys.header("analyst")
    assert [client.get("/v1/plans/scales", headers=hdr).status_code for _ in range(3)] == [200] * 3
    r = client.get("/v1/plans/scales", headers=hdr)
    assert r.status_code == 429
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.headers["retry-after"] == "1"           # one token refills in 0.5 s at 2/s
    # another key has its own bucket
    assert client.get("/v1/plans/scales", headers=keys.header("admin")).status_code == 200
    clock.t += 0.5
    assert client.get("/v1/plans/scales", headers=hdr).status_code == 200
    assert client.get("/v1/plans/scales", headers=hdr).status_code == 429
    assert client.get("/healthz").status_code == 200  # the open route is not limited


def test_streamed_body_over_the_cap_is_refused(client, keys, app):
    limit = app.state.settings.max_body_bytes

    def chunks():
        piece = b" " * 65536
        for _ in range(limit // len(piece) + 2):
            yield piece

    r = client.post("/v1/records", content=chunks(), headers={**keys.header("field"),
                                                              "content-type": "application/json"})
    assert r.status_code == 413
    assert r.headers["content-type"].startswith("application/problem+json")


@pytest.mark.parametrize("text", ["'; DROP TABLE records; --", "<img src=x onerror=alert(1)>",
                                  "Robert'); DELETE FROM cycles;--", "\u202eevil", "💡 ünïcode"])
def test_ids_and_notes_are_stored_literally(client, keys, text):
    fid = new_facility(client, keys)
    rid = ("id-" + text)[:64]
    if "\u202e" in text:       # a bidi control may be in a note, not in an id (it is refused)
        r = client.post("/v1/records", json=record(fid, rid, 0), headers=keys.header("field"))
        assert r.status_code == 422 and r.json()["errors"][0]["field"] == "record_id"
        rid = "id-bidi-note"
    r = client.post("/v1/records", json=record(fid, rid, 0, note=text, inspector=text[:200]),
                    headers=keys.header("field"))
    assert r.status_code == 201, r.text
    got = client.get(f"/v1/facilities/{fid}/records", headers=keys.header("analyst")).json()
    assert got["items"][0]["record_id"] == rid and got["items"][0]["note"] == text
    assert client.get("/v1/facilities", headers=keys.header("analyst")).json()["total"] >= 1
