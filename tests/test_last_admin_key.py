"""Revoking the last active admin key would lock every admin out: refused with 409."""
import pytest

from service.errors import Conflict


def test_revoking_the_last_active_admin_key_is_refused(client, keys):
    admin = keys.header("admin")
    listed = client.get("/v1/keys", headers=admin).json()
    (mine,) = [k["id"] for k in listed if k["role"] == "admin" and k["revoked_at"] is None]
    r = client.post(f"/v1/keys/{mine}/revoke", headers=admin)
    assert r.status_code == 409, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert "last active admin key" in r.json()["detail"]
    assert client.get("/v1/keys", headers=admin).status_code == 200      # still works
    # with a second admin key the first one can go
    second = client.post("/v1/keys", json={"role": "admin", "label": "deputy"},
                         headers=admin).json()
    r = client.post(f"/v1/keys/{mine}/revoke", headers=admin)
    assert r.status_code == 200 and r.json()["revoked_at"] is not None
    # and now the deputy's key is the last one
    deputy = {"Authorization": f"Bearer {second['key']}"}
    r = client.post(f"/v1/keys/{second['id']}/revoke", headers=deputy)
    assert r.status_code == 409


def test_other_roles_can_still_be_revoked(client, keys):
    admin = keys.header("admin")
    field = [k["id"] for k in client.get("/v1/keys", headers=admin).json()
             if k["role"] == "field"][0]
    assert client.post(f"/v1/keys/{field}/revoke", headers=admin).status_code == 200


def test_store_refuses_too(app):
    store = app.state.monitor.store
    row, _ = store.add_key("admin", "only", "2026-01-01T00:00:00Z")
    with pytest.raises(Conflict, match="last active admin key"):
        store.revoke_key(row["id"], "2026-01-02T00:00:00Z")
