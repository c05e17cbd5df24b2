"""The whole-database replay (vectorised) agrees with the record-by-record fold."""
import numpy as np
from hypothesis import given, settings, strategies as st

from service.monitor import Evidence, replay
from service.stats import SprtPlan
from service.store import Store
from service.verify import replay_counts, verify_database

from .conftest import new_facility, record
from .test_cli_service import run

PLANS = [SprtPlan.wald(0.02, 0.08, 0.05, 0.10), SprtPlan.wald(0.04, 0.12, 0.05, 0.10,
                                                                max_units=40, cut_llr=0.5)]


@settings(max_examples=300, deadline=None)
@given(which=st.sampled_from([0, 1]),
       recs=st.lists(st.tuples(st.integers(1, 5), st.integers(0, 5)), max_size=80),
       stop=st.one_of(st.none(), st.integers(0, 90)))
def test_vectorised_replay_equals_the_fold(which, recs, stop):
    plan = PLANS[which]
    recs = [(u, min(b, u)) for u, b in recs]
    evidence = [Evidence(i + 1, u, b, "t") for i, (u, b) in enumerate(recs)]
    folded, counted = replay(plan, evidence, stop_seq=stop)
    fast, fast_counted = replay_counts(plan, np.arange(1, len(recs) + 1),
                                       np.array([u for u, _ in recs], dtype=np.int64),
                                       np.array([b for _, b in recs], dtype=np.int64), stop)
    assert (fast.status, fast.units, fast.nonconforming, fast.decided_after_units,
            fast.decided_seq, fast.at_cap) == (folded.status, folded.units, folded.nonconforming,
                                               folded.decided_after_units, folded.decided_seq,
                                               folded.at_cap)
    assert list(fast_counted) == counted


def test_verify_command_finds_a_tampered_state(client, keys, app):
    fids = [new_facility(client, keys) for _ in range(3)]
    for fid in fids:
        for i in range(5):
            client.post("/v1/records", json=record(fid, f"{fid}-{i}", int(i == 2)),
                        headers=keys.header("field"))
    client.post(f"/v1/records/{fids[0]}-2/void", json={"reason": "x"},
                headers=keys.header("analyst"))
    db = app.state.settings.db_path
    assert verify_database(Store(db)).ok
    out = run("verify", "--db", str(db))
    assert out.returncode == 0 and "every stored state equals its replay" in out.stdout
    store = Store(db)
    with store.write() as conn:
        conn.execute("UPDATE cycles SET units = units + 1 WHERE facility_id = ?", (fids[1],))
    report = verify_database(Store(db))
    assert [m["facility_id"] for m in report.mismatches] == [fids[1]]
    out = run("verify", "--db", str(db))
    assert out.returncode == 1 and "1 cycle(s) differ" in out.stdout


def test_wide_numbers_take_the_two_column_path(client, keys, app, monkeypatch):
    import service.verify as v
    fid = new_facility(client, keys)
    for i in range(6):
        client.post("/v1/records", json=record(fid, f"{fid}-{i}", int(i == 1), units=3),
                    headers=keys.header("field"))
    db = app.state.settings.db_path
    fast = verify_database(Store(db))
    monkeypatch.setattr(v, "_N_BITS", 1)       # units of 3 no longer fit: fall back
    slow = verify_database(Store(db))
    assert fast.ok and slow.ok and fast.records == slow.records == 6


def test_cycles_past_255_are_replayed_as_themselves(client, keys, app):
    # A facility closed and reopened until its cycle number needs more than 8 bits, beside
    # another facility registered after it; both replay clean, and a tampered state of a
    # high cycle is named with its own number.
    fid, other = new_facility(client, keys), new_facility(client, keys)
    store = app.state.monitor.store
    store._conn().execute("PRAGMA synchronous = OFF")      # 600 small commits, test speed only
    actor, now = ("test", "admin"), "2026-12-01T08:00:00.000000Z"
    snapshot = app.state.monitor.plans.snapshot("dispensers")
    for _ in range(299):
        store.close_cycle(fid, "rotation", now, actor)
        store.open_cycle(fid, snapshot, now, actor)
    assert store.facility(fid)["current_cycle"] == 300
    for i in range(4):
        for f in (fid, other):
            r = client.post("/v1/records", json=record(f, f"{f}-{i}", int(i == 1)),
                            headers=keys.header("field"))
            assert r.status_code in (200, 201), r.text
    report = verify_database(Store(app.state.settings.db_path))
    assert report.ok, report.mismatches[:3]
    assert (report.records, report.cycles) == (8, 301)
    with store.write() as conn:
        conn.execute("UPDATE cycles SET nonconforming = 0 WHERE facility_id = ? AND cycle = 300",
                     (fid,))
    report = verify_database(Store(app.state.settings.db_path))
    assert [(m["facility_id"], m["cycle"]) for m in report.mismatches] == [(fid, 300)]

def test_all_cycles_at_once_equal_one_at_a_time():
    """replay_groups over many cycles of several plans equals replay_counts (itself checked
    against the record-by-record fold above) cycle by cycle; seeded random cycles."""
    from service.replay_groups import replay_groups
    rng = np.random.default_rng(2026_12_02)
    plans = PLANS + [SprtPlan.wald(0.1, 0.3, 0.01, 0.01, max_units=15, cut_llr=0.0)]
    cycles = []
    for _ in range(400):
        plan = plans[int(rng.integers(len(plans)))]
        size = int(rng.integers(1, 60))
        u = rng.integers(1, 4, size=size)
        rate = rng.choice([0.02, 0.08, 0.2, 0.4])
        b = rng.binomial(u, rate)
        cycles.append((plan, u.astype(np.int64), b.astype(np.int64)))
    sizes = np.array([c[1].size for c in cycles])
    got = replay_groups(np.r_[0, np.cumsum(sizes)], np.concatenate([c[1] for c in cycles]),
                        np.concatenate([c[2] for c in cycles]),
                        g12=np.array([p.g1 + p.g2 for p, _, _ in cycles]),
                        g2=np.array([p.g2 for p, _, _ in cycles]),
                        upper=np.array([p.upper_llr for p, _, _ in cycles]),
                        lower=np.array([p.lower_llr for p, _, _ in cycles]),
                        cap=np.array([p.max_units or np.iinfo(np.int64).max
                                      for p, _, _ in cycles]),
                        cut=np.array([p.cut_llr for p, _, _ in cycles]))
    at = 0
    statuses = set()
    for k, (plan, u, b) in enumerate(cycles):
        state, counted = replay_counts(plan, np.arange(1, u.size + 1), u, b)
        after = state.decided_after_units if state.decided_after_units is not None else -1
        assert (got.status[k], got.units[k], got.nonconforming[k], got.decided_after_units[k],
                bool(got.at_cap[k])) == (state.status, state.units, state.nonconforming, after,
                                         state.at_cap)
        assert list(got.counted[at:at + u.size]) == list(counted)
        at += u.size
        statuses.add((state.status, state.at_cap))
    assert len(statuses) >= 4             # flagged, cleared, monitoring and a cap decision
