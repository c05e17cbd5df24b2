"""Keys with an expiry: `keys add --expires`, the keys API, 401 for an expired key (API and
dashboard sign-in), and the expiry in the chained action log.

Expected instants are computed with the standard library's datetime arithmetic (an outside
check of the span parsing); the expiry comparison is on the clock's fixed-width UTC text.
"""
import sqlite3
from datetime import datetime, timedelta

import pytest
from fastapi.testclient import TestClient

from service.commands.keys import expiry
from service.store import Store
from service.trail_check import check_trail

from .test_cli_service import run
from .test_ui_pages import signin

NOW = datetime.fromisoformat("2026-12-01T08:00:00+00:00")


@pytest.mark.parametrize("text, delta", [("90d", timedelta(days=90)), ("12h", timedelta(hours=12)),
                                         ("2w", timedelta(days=14)), (" 1d ", timedelta(days=1))])
def test_spans_count_from_now(text, delta):
    want = (NOW + delta).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    assert expiry(text, NOW) == want


def test_an_rfc3339_time_is_taken_as_the_instant_and_nonsense_is_refused():
    assert expiry("2027-03-01T09:30:00+01:00", NOW) == "2027-03-01T08:30:00.000000Z"
    for bad in ("90", "0d", "3y", "-1d", "tomorrow", "2027-03-01"):
        with pytest.raises(ValueError, match="--expires"):
            expiry(bad, NOW)


def test_keys_add_expires_from_the_cli(tmp_path):
    db = tmp_path / "k.db"
    out = run("keys", "add", "--role", "field", "--label", "tablet 4", "--expires", "90d",
              "--db", str(db))
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().startswith("sqa_") and len(out.stdout.strip().splitlines()) == 1
    row = sqlite3.connect(db).execute("SELECT created_at, expires_at FROM keys").fetchone()
    created, ends = (datetime.fromisoformat(t.replace("Z", "+00:00")) for t in row)
    assert ends - created == timedelta(days=90)
    assert f"expires at {row[1]}" in out.stderr
    listed = run("keys", "list", "--db", str(db))
    assert row[1] in listed.stdout
    bad = run("keys", "add", "--role", "field", "--label", "x", "--expires", "soon",
              "--db", str(db))
    assert bad.returncode == 2 and "--expires must be a span" in bad.stderr
    past = run("keys", "add", "--role", "field", "--label", "x", "--expires",
               "2020-01-01T00:00:00Z", "--db", str(db))
    assert past.returncode == 2 and "must lie in the future" in past.stderr
    assert sqlite3.connect(db).execute("SELECT COUNT(*) FROM keys").fetchone()[0] == 1


def _create(client, keys, **extra):
    return client.post("/v1/keys", json={"role": "field", "label": "tablet 7", **extra},
                       headers=keys.header("admin"))


def test_an_expired_key_gets_401_saying_so(client, keys, app):
    monitor = app.state.monitor
    real = monitor.clock
    r = _create(client, keys, expires_at="2099-01-01T00:00:00+02:00")
    assert r.status_code == 201, r.text
    made = r.json()
    assert made["expires_at"] == "2098-12-31T22:00:00.000000Z"
    bearer = {"Authorization": f"Bearer {made['key']}"}
    assert client.post("/v1/records", json={"records": []}, headers=bearer).status_code != 401
    listed = {k["id"]: k for k in client.get("/v1/keys", headers=keys.header("admin")).json()}
    assert listed[made["id"]]["expires_at"] == made["expires_at"]
    try:
        monitor.clock = lambda: "2098-12-31T22:00:00.000000Z"      # the very instant
        r = client.post("/v1/records", json={"records": []}, headers=bearer)
        assert r.status_code == 401
        assert r.headers["content-type"].startswith("application/problem+json")
        assert r.headers["www-authenticate"].startswith("Bearer")
        body = r.json()
        assert body["status"] == 401
        assert body["detail"].startswith("this API key expired at 2098-12-31T22:00:00.000000Z")
        # a key without an expiry goes on working
        assert client.get("/v1/keys", headers=keys.header("admin")).status_code == 200
    finally:
        monitor.clock = real
    # the expiry is in the action log, and so in the trail
    actions = Store(app.state.settings.db_path).read(
        "SELECT detail FROM actions WHERE action = 'key_added' ORDER BY id DESC LIMIT 1")
    assert '"expires_at": "2098-12-31T22:00:00.000000Z"' in actions[0]["detail"]
    assert check_trail(Store(app.state.settings.db_path)._conn()).ok


@pytest.mark.parametrize("value, message", [("2001-01-01T00:00:00Z", "must lie in the future"),
                                            ("next week", "RFC 3339"), (7, "")])
def test_a_bad_expiry_is_refused_with_422_naming_the_field(client, keys, value, message):
    r = _create(client, keys, expires_at=value)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert "expires_at" in r.text and message in r.text


def test_an_expired_key_cannot_sign_in_and_a_session_ends_with_its_key(app, keys, client):
    made = _create(client, keys, role="analyst", expires_at="2099-01-01T00:00:00Z").json()
    monitor = app.state.monitor
    real = monitor.clock
    try:
        monitor.clock = lambda: "2099-01-01T00:00:01.000000Z"
        with TestClient(app) as c:
            r = signin(c, made["key"])
            assert r.status_code == 401 and "That key expired at 2099-01-01T00:00:00" in r.text
            assert "seqaudit_session" not in r.cookies
    finally:
        monitor.clock = real
    with TestClient(app) as c:
        assert signin(c, made["key"]).status_code == 303
    ends = Store(app.state.settings.db_path).read(
        "SELECT s.expires_at FROM ui_sessions s JOIN keys k ON k.id = s.key_id "
        "WHERE k.id = ?", (made["id"],))[0]["expires_at"]
    limit = datetime.fromisoformat("2099-01-01T00:00:00+00:00").timestamp()
    assert ends <= limit
