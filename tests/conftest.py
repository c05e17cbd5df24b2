"""Shared fixtures: a real SQLite file per test, the app over it, and keys of each role."""
from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.settings import load_settings

# the shared helpers assert too: let pytest explain their failures as it does in test modules
pytest.register_assert_rewrite("tests.browser", "tests.reference")

_ids = itertools.count(1)


@dataclass
class Keys:
    field: str
    analyst: str
    admin: str
    revoked: str

    def header(self, role: str | None) -> dict:
        return {} if role is None else {"Authorization": f"Bearer {getattr(self, role)}"}


def make_keys(store) -> Keys:
    now = "2026-01-01T00:00:00.000000Z"
    made = {role: store.add_key(role, f"test {role}", now)[1]
            for role in ("field", "analyst", "admin")}
    row, revoked = store.add_key("admin", "test revoked", now)
    store.revoke_key(row["id"], now)
    return Keys(revoked=revoked, **made)


def quiet_settings(folder):
    """The repository's config on a fresh database in ``folder``; the scheduler is off
    (tests call the job functions directly) and backups stay in the folder."""
    base = load_settings(db_path=folder / "seqaudit.db")
    return base.with_overrides(schedule=replace(base.schedule, enabled=False,
                                                backup_dir=folder / "backups"))


@pytest.fixture
def settings(tmp_path):
    return quiet_settings(tmp_path)


@pytest.fixture
def app(settings):
    return create_app(settings)


@pytest.fixture
def client(app):
    with TestClient(app) as c:
        yield c


@pytest.fixture
def keys(app) -> Keys:
    return make_keys(app.state.monitor.store)


def new_facility(client, keys, plan="dispensers", prefix="F") -> str:
    facility_id = f"{prefix}-{next(_ids)}"
    r = client.post("/v1/facilities", json={"facility_id": facility_id,
                                            "name": f"Facility {facility_id}", "plan": plan},
                    headers=keys.header("admin"))
    assert r.status_code == 201, r.text
    return facility_id


def record(facility_id, record_id, nonconforming=0, units=1, **extra) -> dict:
    return {"record_id": record_id, "facility_id": facility_id,
            "observed_at": "2026-11-30T09:15:00Z", "units": units,
            "nonconforming": nonconforming, **extra}


# the Playwright fixtures of the browser tests (tests/browser.py), for every test module
from .browser import browser, page  # noqa: E402, F401
