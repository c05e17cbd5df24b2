"""The demo scenario works from frames and draws: weekly frames, RFC 3797 draws, records of
drawn units, assignments for the simulated tablets."""
import json
import os

from service.commands.demo import demo_seed, feed, office, seed
from service.demo_scenario import DRIFTING, agencies
from service.store import Store
from service.verify import verify_database

from .conftest import quiet_settings
from .live_server import LiveServer, quiet_config


def test_seed_registers_frames_draws_and_drawn_history(tmp_path):
    settings = quiet_settings(tmp_path)
    keys = seed(settings, tmp_path / "keys.json")
    assert set(keys) == {"field", "analyst", "admin"}
    store = Store(settings.db_path)
    facilities = store.read("SELECT facility_id FROM facilities")
    assert len(facilities) == 30
    cycles = store.read("SELECT plan_json, status FROM cycles_planned")
    assert all(json.loads(c["plan_json"])["require_draw"] for c in cycles)
    assert {c["status"] for c in cycles} >= {"monitoring", "flagged", "cleared"}
    frames = store.read("SELECT facility_id, COUNT(*) AS n FROM frames GROUP BY facility_id")
    assert len(frames) == 30 and all(f["n"] == 5 for f in frames)     # four weeks and this one
    records = store.read("SELECT draw_id, excluded, counted, void FROM records")
    drawn = [r for r in records if r["draw_id"] is not None]
    walkins = [r for r in records if r["excluded"] is not None]
    assert drawn and walkins and all(not r["counted"] for r in walkins)
    assert all(r["draw_id"] is not None for r in records if r["counted"])  # evidence is drawn
    assert verify_database(store).ok
    open_ids = {r["facility_id"] for r in store.read(
        "SELECT f.facility_id FROM facilities f JOIN cycles c ON c.facility_id = f.facility_id "
        "AND c.cycle = f.current_cycle WHERE c.status = 'monitoring'")}
    assert {a["facility_id"] for a in store.assignments()} == open_ids   # this week's work
    # the week's seed is a fixed stand-in for a lottery: three sources of six numbers
    text = demo_seed(__import__("datetime").date(2026, 11, 30))
    assert text == demo_seed(__import__("datetime").date(2026, 11, 30))
    assert [len(part.split()) for part in text.split("/")] == [6, 6, 6]


def test_tablets_work_from_assignments_and_the_office_tops_up(tmp_path):
    settings = quiet_settings(tmp_path)
    keys = seed(settings, tmp_path / "keys.json")
    store = Store(settings.db_path)
    before = {(a["facility_id"], a["unit_ref"]) for a in store.assignments()}
    with LiveServer(settings.db_path, config=quiet_config(tmp_path)) as server:
        sent = feed(server.url, keys["field"], seconds=4, rate=20)
        assert sent > 5
        rows = store.read("SELECT facility_id, unit_ref, draw_id, excluded, record_id FROM "
                          "records WHERE record_id LIKE 'demo-%'")
        assert rows
        drifting = agencies()[DRIFTING]["facility_id"]
        for r in rows:   # a unit from the assignments (drawn) or, rarely, a walk-in (excluded),
            # or a complaint re-check of the drifting agency, watched after its clear
            assert (r["facility_id"], r["unit_ref"]) in before or r["excluded"] == "not_drawn" \
                or (r["facility_id"] == drifting and "-AFTER-" in r["unit_ref"])
        # empty one facility's list, then the office draws again for it
        fid = next(a["facility_id"] for a in store.assignments())
        with store.write() as conn:
            conn.execute("UPDATE draw_units SET record_seq = -1 WHERE facility_id = ? AND "
                         "record_seq IS NULL", (fid,))
        assert fid not in {a["facility_id"] for a in store.assignments()}
        made = office(server.url, keys["analyst"], seconds=1, every_s=5)
        assert made >= 1
        assert fid in {a["facility_id"] for a in store.assignments()}
    assert verify_database(store).ok


def test_the_servers_workers_keep_the_demos_draw_rule(tmp_path, monkeypatch):
    """Workers rebuild their settings from the environment `serve` exports: the cycles they
    open (a facility registered later, a new cycle, a remonitor) must require draws too."""
    from service.commands.demo import demo_settings
    from service.commands.serve import export_settings
    from service.settings import load_settings

    monkeypatch.setattr(os, "environ", dict(os.environ))    # export_settings writes here
    plain = quiet_settings(tmp_path)
    settings = demo_settings(plain)
    assert settings.plans and all(s.require_draw for s in settings.plans.values())
    export_settings(settings)
    rebuilt = load_settings()
    assert rebuilt.require_draw and rebuilt.plans.keys() == settings.plans.keys()
    assert all(spec.require_draw for spec in rebuilt.plans.values())
    # without the demo nothing changes: the plans' own tables decide
    export_settings(plain)
    assert not any(spec.require_draw for spec in load_settings().plans.values())


def test_service_wide_require_draw_in_the_config_file(tmp_path):
    from service.settings import load_settings

    config = tmp_path / "c.toml"
    config.write_text("[service]\nrequire_draw = true\n[plans.a]\np0 = 0.01\np1 = 0.1\n"
                      "alpha = 0.05\nbeta = 0.1\n[plans.b]\np0 = 0.01\np1 = 0.1\n"
                      "alpha = 0.05\nbeta = 0.1\nrequire_draw = false\n")
    got = load_settings(config, environ={})
    assert got.require_draw and all(s.require_draw for s in got.plans.values())
    assert not any(s.require_draw for s in load_settings(
        config, environ={"SEQAUDIT_REQUIRE_DRAW": "false"}).plans.values())
