"""`seqaudit restore` refuses while a server holds the database."""
import pytest

from service.jobs.backup import BackupError, backup_to, restore
from service.store import Store

from .conftest import make_keys, quiet_settings
from .live_server import LiveServer, quiet_config
from .test_cli_service import run


def test_restore_refuses_while_a_live_server_holds_the_database(tmp_path):
    db = tmp_path / "live.db"
    store = Store(db)
    store.migrate()
    keys = make_keys(store)
    store.close()
    snapshot = tmp_path / "snap.db"
    backup_to(db, snapshot)
    import httpx2
    with LiveServer(db, config=quiet_config(tmp_path)) as server:
        admin = {"Authorization": f"Bearer {keys.admin}"}
        r = httpx2.post(server.url + "/v1/facilities", headers=admin,
                        json={"facility_id": "SA-1", "name": "after the snapshot",
                              "plan": "dispensers"})
        assert r.status_code == 201
        out = run("restore", str(snapshot), "--db", str(db))
        assert out.returncode != 0
        assert "in use by a running seqaudit server" in out.stderr
        assert "Traceback" not in out.stderr
        # nothing acknowledged was lost
        r = httpx2.get(server.url + "/v1/facilities/SA-1", headers=admin)
        assert r.status_code == 200
    # with the server stopped the restore goes ahead
    out = run("restore", str(snapshot), "--db", str(db))
    assert out.returncode == 0, out.stderr
    assert Store(db).read("SELECT COUNT(*) AS n FROM facilities")[0]["n"] == 0


def test_restore_refuses_while_an_app_is_running_in_process(tmp_path):
    from fastapi.testclient import TestClient

    from service.api import create_app
    settings = quiet_settings(tmp_path)
    app = create_app(settings)
    snapshot = tmp_path / "snap.db"
    backup_to(settings.db_path, snapshot)
    with TestClient(app):
        with pytest.raises(BackupError, match="in use by a running seqaudit server"):
            restore(snapshot, settings.db_path)
    assert restore(snapshot, settings.db_path) >= 1
