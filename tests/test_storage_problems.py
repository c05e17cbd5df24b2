"""Storage trouble answered plainly: a full disk is 503 naming the cause, /readyz runs SQLite's
quick integrity check, and copying the .db file alone is not a backup."""
import sqlite3

import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.store import Store

from .conftest import make_keys, new_facility, quiet_settings, record


@pytest.fixture
def full_disk(monkeypatch):
    """From the moment it is called, every new SQLite connection of the store may not grow
    the file by one page: SQLite itself then answers SQLITE_FULL, 'database or disk is full'
    (PRAGMA max_page_count, https://sqlite.org/pragma.html#pragma_max_page_count)."""
    original = Store._conn

    def limited(self):
        conn = original(self)
        pages = conn.execute("PRAGMA page_count").fetchone()[0]
        conn.execute(f"PRAGMA max_page_count = {pages}")
        return conn

    def fill(store):
        monkeypatch.setattr(Store, "_conn", limited)
        store._close_connection()      # this thread's next connection is limited
    return fill


def test_disk_full_is_a_503_problem_naming_the_cause(client, keys, app, full_disk):
    fid = new_facility(client, keys)
    store = app.state.monitor.store
    full_disk(store)     # (the group commit's writer thread connects on first use: limited)
    body = {"records": [record(fid, f"fill-{i}", note="x" * 1500) for i in range(1000)]}
    r = client.post("/v1/records", json=body, headers=keys.header("field"))
    assert r.status_code == 503, r.text[:300]
    assert r.headers["content-type"].startswith("application/problem+json")
    problem = r.json()
    assert problem["type"] == "/problems/storage-full"
    assert "disk is full" in problem["detail"]
    r = client.post("/v1/facilities", json={"facility_id": "F-full", "name": "x" * 200,
                                            "plan": "dispensers"},
                    headers=keys.header("admin"))
    assert r.status_code in (201, 503)          # a small write may still fit in a free page
    if r.status_code == 503:
        assert r.json()["type"] == "/problems/storage-full"


def test_readyz_runs_the_quick_check(client):
    r = client.get("/readyz")
    assert r.status_code == 200
    assert r.json() == {"status": "ready", "quick_check": "ok"}


def corrupt_an_index(db):
    """Overwrite the pages of the records index on record_id with bytes that are no b-tree."""
    conn = sqlite3.connect(db)
    page_size = conn.execute("PRAGMA page_size").fetchone()[0]
    roots = [r for (r,) in conn.execute(
        "SELECT rootpage FROM sqlite_master WHERE type = 'index' AND tbl_name = 'records'")]
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    with open(db, "r+b") as fh:
        for root in roots:
            fh.seek((root - 1) * page_size)
            fh.write(b"\x0d\x00\x00\xff\xff" + b"\xee" * (page_size - 5))


def test_readyz_fails_on_corrupt_pages_while_healthz_says_ok(tmp_path):
    settings = quiet_settings(tmp_path)
    with TestClient(create_app(settings)) as c:
        keys = make_keys(c.app.state.monitor.store)
        fid = new_facility(c, keys)
        c.post("/v1/records", json={"records": [record(fid, f"r-{i}") for i in range(200)]},
               headers=keys.header("field"))
    corrupt_an_index(settings.db_path)
    with TestClient(create_app(settings)) as c:
        assert c.get("/healthz").status_code == 200
        r = c.get("/readyz")
        assert r.status_code == 503
        assert r.headers["content-type"].startswith("application/problem+json")
        assert r.json()["type"] == "/problems/storage-corrupt"
        assert "seqaudit backup" not in r.json()["detail"]     # it names the cause
        assert "quick_check" in r.json()["detail"]


@pytest.mark.parametrize("kind", ["junk file", "directory"])
def test_start_up_failure_is_one_clear_line(tmp_path, kind):
    from .live_server import free_port, quiet_config
    from .test_cli_service import run
    db = tmp_path / "bad.db"
    if kind == "junk file":
        db.write_bytes(b"this is not a database at all" * 200)
    else:
        db.mkdir()
    out = run("serve", "--db", str(db), "--port", str(free_port()),
              "--config", str(quiet_config(tmp_path)))
    assert out.returncode == 1
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in out.stderr, out.stderr[-2000:]
    assert lines[0].startswith("seqaudit serve: error: cannot open the database")
    assert str(db) in lines[0]
