"""The tamper-evident trail on a real database: what is chained, hand edits caught and named,
a database of the previous version migrated, the chain recomputed from the README's rule.

The outside check is the README's recipe itself ("Tamper-evident trail"): the chain is
recomputed here with hashlib and json from the tables, independently of service.trail_hash.
"""
import contextlib
import hashlib
import io
import json
import shutil
import sqlite3
import subprocess
from pathlib import Path

import pypdf
import pytest

from service.store import Store
from service.store.group_commit import Job
from service.store.migrations import MIGRATIONS
from service.trail_check import check_trail

from .conftest import new_facility, record
from .old_schema import database_at
from .test_cli_service import run

RECORD_FIELDS = ["cycle", "draw_id", "draw_order", "excluded", "facility_id", "inspector",
                 "key_label", "nonconforming", "note", "observed_at", "observed_utc",
                 "received_at", "record_id", "seq", "unit_ref", "units"]


def readme_recompute(db) -> list[str]:
    """The README's recipe: every entry_sha256 recomputed from the tables (records from their
    rows, every other kind from the content stored with the entry)."""
    con = sqlite3.connect(db)
    con.row_factory = sqlite3.Row
    groups = {}
    for r in con.execute("SELECT * FROM records ORDER BY seq"):
        groups.setdefault(r["trail_n"], []).append([r[k] for k in RECORD_FIELDS])
    prev, out = "0" * 64, []
    for e in con.execute("SELECT * FROM trail ORDER BY n").fetchall():
        content = ({"fields": RECORD_FIELDS, "rows": groups[e["n"]]} if e["kind"] == "records"
                   else json.loads(e["content"]))
        entry = {"n": e["n"], "kind": e["kind"], "at": e["at"], "content": content,
                 "prev_sha256": prev}
        text = json.dumps(entry, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
        prev = hashlib.sha256(text.encode("utf-8")).hexdigest()
        out.append(prev)
    return out


def workload(client, keys, settings):
    """Records (one facility flagged), a void that revises, an acknowledgement, a key, a
    cycle closed and opened: every kind of entry."""
    flagged, calm = new_facility(client, keys), new_facility(client, keys, prefix="Q")
    posted = client.post("/v1/records", headers=keys.header("field"), json={"records": [
        record(flagged, f"{flagged}-{i}", nonconforming=1) for i in range(6)] + [
        record(calm, f"{calm}-{i}", note="pump 3 \"north\"\n", inspector="Łukasz Nowak")
        for i in range(4)]})
    assert posted.status_code == 200, posted.text
    assert client.get(f"/v1/facilities/{flagged}", headers=keys.header("analyst")
                      ).json()["status"] == "flagged"
    r = client.post(f"/v1/records/{flagged}-0/void", json={"reason": "wrong pump"},
                    headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    alert_id = client.get("/v1/alerts", headers=keys.header("analyst")).json()["items"][0]["alert_id"]
    assert client.post(f"/v1/alerts/{alert_id}/ack", json={"note": "seen"},
                       headers=keys.header("analyst")).status_code == 200
    assert client.post("/v1/keys", json={"role": "field", "label": "tablet 9"},
                       headers=keys.header("admin")).status_code == 201
    assert client.post(f"/v1/facilities/{calm}/close", json={"reason": "season over"},
                       headers=keys.header("analyst")).status_code == 200
    return flagged, calm


def test_every_kind_is_chained_and_recomputes_from_the_readme_rule(client, keys, app):
    flagged, calm = workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    store = Store(db)
    report = check_trail(store._conn())
    assert report.ok, report.problems
    kinds = {r["kind"]: r["n"] for r in store.read(
        "SELECT kind, COUNT(*) AS n FROM trail GROUP BY kind")}
    counts = {t: store.read(f"SELECT COUNT(*) AS n FROM {t}")[0]["n"]
              for t in ("records", "alerts", "actions")}
    assert kinds["records"] == 1 and counts["records"] == 10     # one request, one entry
    assert kinds["void"] == 1
    assert kinds.get("decision", 0) + kinds.get("alert", 0) == counts["alerts"] >= 2
    assert kinds["action"] == counts["actions"]
    actions = {r["action"] for r in store.read("SELECT action FROM actions")}
    assert {"key_added", "key_revoked", "facility_registered", "record_voided",
            "alert_acknowledged", "cycle_closed"} <= actions
    hashes = [r["entry_sha256"] for r in store.read("SELECT entry_sha256 FROM trail ORDER BY n")]
    assert readme_recompute(db) == hashes
    assert report.head_sha256 == hashes[-1] and report.entries == len(hashes)
    # every record row points at its request's entry
    assert store.read("SELECT COUNT(*) AS n FROM records r JOIN trail t ON t.n = r.trail_n "
                      "AND t.kind = 'records' AND t.ref = '1-10'")[0]["n"] == 10
    out = run("verify", "--db", str(db))
    assert out.returncode == 0, out.stdout + out.stderr
    assert "every entry matches its row and the entry before it" in out.stdout
    assert hashes[-1] in out.stdout
    # the README's own lines, run as printed
    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    code = readme.split("## Tamper-evident trail", 1)[1].split("```python\n", 1)[1]
    code = code.split("```", 1)[0].replace('"seqaudit.db"', repr(str(db)))
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(code, {})
    assert printed.getvalue() == f"head {hashes[-1]}\n"


def shell(db, sql: str) -> None:
    """An edit as someone with the file would make it: the sqlite3 shell when installed."""
    exe = shutil.which("sqlite3")
    if exe:
        subprocess.run([exe, str(db), sql], check=True, capture_output=True, timeout=60)
    else:
        con = sqlite3.connect(db)
        con.executescript(sql)
        con.close()


def entry_of(db, kind, ref) -> int:
    return sqlite3.connect(db).execute("SELECT n FROM trail WHERE kind = ? AND ref = ?",
                                       (kind, str(ref))).fetchone()[0]


def record_entry(db, record_id) -> int:
    return sqlite3.connect(db).execute("SELECT trail_n FROM records WHERE record_id = ?",
                                       (record_id,)).fetchone()[0]


def test_a_record_edited_in_the_sqlite3_shell_fails_verify_naming_its_entry(client, keys, app):
    flagged, calm = workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    seq = Store(db).record(f"{calm}-2")["seq"]
    n = record_entry(db, f"{calm}-2")
    shell(db, f"UPDATE records SET nonconforming = 1 WHERE seq = {seq};")
    out = run("verify", "--db", str(db))
    assert out.returncode == 1
    want = (f"entry {n} (records seq 1-10: 10 record(s), '{flagged}-0', '{flagged}-1', "
            f"'{flagged}-2', ...) does not match the records' rows")
    assert want in out.stdout and want in out.stderr
    report = check_trail(Store(db)._conn())
    assert [p["n"] for p in report.problems] == [n]
    # a record posted alone is its own entry, named by its id
    store = Store(db)
    from service.store import RecordIn
    store.ingest([RecordIn("solo-1", calm, "2026-12-02T09:00:00Z",
                           "2026-12-02T09:00:00.000000Z", 1, 0)], "tablet",
                 "2026-12-02T09:00:01.000000Z")
    solo, solo_seq = record_entry(db, "solo-1"), store.record("solo-1")["seq"]
    shell(db, "UPDATE records SET nonconforming = 1 WHERE record_id = 'solo-1';")
    out = run("verify", "--db", str(db))
    assert f"entry {solo} (records seq {solo_seq}-{solo_seq}: 1 record(s), 'solo-1')" in \
        out.stderr


@pytest.mark.parametrize("edit, kind, problem", [
    ("UPDATE records SET void_reason = 'typo' WHERE void = 1", "void", "does not match its row"),
    ("UPDATE records SET void = 0 WHERE void = 1", "void", "its row is missing"),
    ("UPDATE actions SET detail = replace(detail, 'seen', 'not seen') "
     "WHERE action = 'alert_acknowledged'", "action", "does not match its row"),
    ("UPDATE alerts SET detail = replace(detail, '\"status\": \"flagged\"', "
     "'\"status\": \"cleared\"') WHERE kind = 'flagged'", "decision", "does not match its row"),
    ("UPDATE trail SET content = replace(content, 'seen', 'unseen') WHERE kind = 'action' AND "
     "content LIKE '%seen%'", "action", "does not match its own content"),
])
def test_edits_of_other_chained_rows_are_named(client, keys, app, edit, kind, problem):
    workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    assert check_trail(Store(db)._conn()).ok
    shell(db, edit + ";")
    report = check_trail(Store(db)._conn())
    first = report.first
    assert first["kind"] == kind and problem in first["problem"], report.problems


def test_a_rewritten_entry_hash_breaks_the_next_link_and_gaps_are_named(client, keys, app):
    workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    shell(db, "UPDATE trail SET entry_sha256 = '" + "f" * 64 + "' WHERE n = 3;")
    report = check_trail(Store(db)._conn())
    assert [p["n"] for p in report.problems][:2] == [3, 4]
    assert "does not carry the hash of entry 3" in report.problems[1]["problem"]
    shell(db, "DELETE FROM trail WHERE n = 7;")
    report = check_trail(Store(db)._conn())
    assert any(p["n"] == 8 and "follows entry 6" in p["problem"] for p in report.problems)


def test_records_deleted_or_slipped_in_are_named(client, keys, app):
    flagged, calm = workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    seq = Store(db).record(f"{calm}-1")["seq"]
    n = record_entry(db, f"{calm}-1")
    shell(db, f"DELETE FROM records WHERE seq = {seq}; INSERT INTO records (seq, record_id, "
              "facility_id, cycle, observed_at, observed_utc, received_at, units, "
              f"nonconforming, counted, void) VALUES (999, 'extra', '{calm}', 1, "
              "'2026-11-30T09:00:00Z', '2026-11-30T09:00:00.000000Z', "
              "'2026-11-30T09:00:00.000000Z', 1, 0, 1, 0);")
    problems = check_trail(Store(db)._conn()).problems
    assert problems[0]["n"] == n and "records were removed" in problems[0]["problem"]
    assert problems[-1]["n"] is None and "record seq 999 ('extra') has no trail entry" in \
        problems[-1]["problem"]


def test_group_commit_of_several_jobs_keeps_one_chain(client, keys, app):
    fid = new_facility(client, keys)
    store = app.state.monitor.store
    from service.store import RecordIn
    jobs = [Job([RecordIn(f"g{j}-{i}", fid, "2026-11-30T09:00:00Z",
                          "2026-11-30T09:00:00.000000Z", 1, 0) for i in range(3)],
                "tablet", f"2026-12-01T08:00:0{j}.000000Z", 0) for j in range(3)]
    store._commit_group(lambda: jobs)
    assert all(o.status == "accepted" for j in jobs for o in j.result())
    report = check_trail(store._conn())
    assert report.ok, report.problems
    assert readme_recompute(app.state.settings.db_path)[-1] == report.head_sha256


# the number of the migration that brings the trail; the previous version had the ones before
TRAIL_VERSION = next(i for i, step in enumerate(MIGRATIONS, start=1)
                     if "tamper-evident trail" in (step.__doc__ or ""))


def _previous_copy(src, dst):
    """A database as the previous version left it: the schema of the migrations before the
    trail's, holding today's rows (the previous code wrote the same rows)."""
    con = database_at(dst, TRAIL_VERSION - 1).conn
    con.execute("ATTACH DATABASE ? AS src", (str(src),))
    for (table,) in con.execute("SELECT name FROM main.sqlite_master WHERE type = 'table' "
                                "AND name != 'schema_version'").fetchall():
        names = ", ".join(r[1] for r in con.execute(f"PRAGMA main.table_info({table})"))
        # cycles then carried their plan snapshot's text, as cycles_planned shows it now
        source = "cycles_planned" if table == "cycles" else table
        con.execute(f"INSERT INTO main.{table} ({names}) SELECT {names} FROM src.{source}")
    con.execute("DETACH DATABASE src")
    con.close()


def test_a_database_of_the_previous_version_is_backfilled_and_verifies(client, keys, app,
                                                                       tmp_path):
    flagged, calm = workload(client, keys, app.state.settings)
    src = app.state.settings.db_path
    old_a, old_b = tmp_path / "olda.db", tmp_path / "oldb.db"
    _previous_copy(src, old_a)
    _previous_copy(src, old_b)
    assert "trail" not in {r[0] for r in sqlite3.connect(old_a).execute(
        "SELECT name FROM sqlite_master WHERE type = 'table'")}
    out = run("verify", "--db", str(old_a))           # migrates, then checks
    assert out.returncode == 0, out.stdout + out.stderr
    store = Store(old_a)
    rows = store.read("SELECT n, kind, ref, at FROM trail ORDER BY n")
    counts = {t: store.read(f"SELECT COUNT(*) AS n FROM {t}")[0]["n"]
              for t in ("records", "alerts", "actions")}
    assert len(rows) == 1 + 1 + counts["alerts"] + counts["actions"]
    # the documented order: records by seq, voids, alerts by id, actions by id
    order = [r["kind"] for r in rows]
    assert order == (["records"] + ["void"]            # the ten records came in one request
                     + [k for k in order if k in ("decision", "alert")]
                     + ["action"] * counts["actions"])
    assert rows[0]["ref"] == "1-10" and rows[0]["at"] == store.record(f"{calm}-0")["received_at"]
    assert readme_recompute(old_a)[-1] == check_trail(store._conn()).head_sha256
    # deterministic: a second copy migrated alone gives the same chain
    Store(old_b).migrate()
    assert [r["entry_sha256"] for r in Store(old_b).read("SELECT entry_sha256 FROM trail "
                                                          "ORDER BY n")] == \
        [r["entry_sha256"] for r in store.read("SELECT entry_sha256 FROM trail ORDER BY n")]
    # and the migrated database goes on: a new record joins the chain
    store.ingest([__import__("service.store", fromlist=["RecordIn"]).RecordIn(
        "after-1", calm, "2026-12-02T09:00:00Z", "2026-12-02T09:00:00.000000Z", 1, 0)],
        "tablet", "2026-12-02T09:00:01.000000Z")
    assert check_trail(store._conn()).ok
    # a hand edit in the migrated database is caught like any other
    shell(old_a, f"UPDATE records SET units = 2 WHERE record_id = '{calm}-0';")
    assert run("verify", "--db", str(old_a)).returncode == 1


def test_the_case_file_cites_the_trail_and_checks_against_the_database(client, keys, app,
                                                                       tmp_path):
    flagged, calm = workload(client, keys, app.state.settings)
    db = app.state.settings.db_path
    # after the void the cycle is decided again: its case file cites the latest decision
    r = client.get(f"/v1/facilities/{flagged}/cycles/1/casefile.json",
                   headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    cf = r.json()
    cited = cf["trail"]
    store = Store(db)
    decision = store.read("SELECT a.alert_id, a.kind, t.n, t.entry_sha256 FROM alerts a JOIN "
                          "trail t ON t.kind = 'decision' AND t.ref = CAST(a.alert_id AS TEXT) "
                          "WHERE a.facility_id = ? AND a.kind IN ('flagged', 'cleared', "
                          "'decision_revised') ORDER BY a.alert_id DESC LIMIT 1", (flagged,))[0]
    assert (cited["decision_entry"]["n"], cited["decision_entry"]["entry_sha256"]) == \
        (decision["n"], decision["entry_sha256"])
    by_seq = {r["seq"]: r for r in store.read("SELECT seq, trail_n FROM records")}
    hashes = {r["n"]: r["entry_sha256"] for r in store.read("SELECT n, entry_sha256 FROM trail")}
    assert [e["seq"] for e in cited["record_entries"]] == [x["seq"] for x in cf["records"]]
    for e in cited["record_entries"]:
        assert e["n"] == by_seq[e["seq"]]["trail_n"] and e["entry_sha256"] == hashes[e["n"]]
    assert len(cited["void_entries"]) == 1
    assert cited["head_when_made"]["entry_sha256"] == readme_recompute(db)[-1]
    pdf = client.get(f"/v1/facilities/{flagged}/cycles/1/casefile.pdf",
                     headers=keys.header("analyst"))
    text = "".join("".join(page.extract_text().split())
                   for page in pypdf.PdfReader(io.BytesIO(pdf.content)).pages)
    assert f"Tamper-evidenttrail:decisionentry{decision['n']},SHA-256" \
           f"{decision['entry_sha256']}" in text
    path = tmp_path / "case.json"
    path.write_text(json.dumps(cf), encoding="utf-8")
    out = run("casefile", "--check", str(path), "--db", str(db))
    assert out.returncode == 0, out.stdout + out.stderr
    assert f"case file of {flagged} cycle 1 matches the database" in out.stdout
    # the CLI writes the same citation
    written = tmp_path / "cli.json"
    assert run("casefile", flagged, "--cycle", "1", "--out", str(written), "--db",
               str(db)).returncode == 0
    assert run("casefile", "--check", str(written), "--db", str(db)).returncode == 0
    # a case file edited after it was made fails, naming what differs
    edited = json.loads(json.dumps(cf))
    edited["records"][1]["nonconforming"] = 0
    path.write_text(json.dumps(edited), encoding="utf-8")
    out = run("casefile", "--check", str(path), "--db", str(db))
    seq = edited["records"][1]["seq"]
    assert out.returncode == 1
    assert f"record seq {seq} ('{flagged}-1'): the case file says nonconforming = 0, the " \
           "database 1" in out.stdout
    # a database edited after the case file was made fails too
    path.write_text(json.dumps(cf), encoding="utf-8")
    shell(db, f"UPDATE records SET units = 3 WHERE seq = {seq};")
    out = run("casefile", "--check", str(path), "--db", str(db))
    assert out.returncode == 1 and "the database's trail does not verify" in out.stdout
    assert "the case file says units = 1, the database 3" in out.stderr
    # unreadable and trail-less files get clear answers
    path.write_text("{not json", encoding="utf-8")
    out = run("casefile", "--check", str(path), "--db", str(db))
    assert out.returncode == 2 and "cannot read" in out.stderr
    path.write_text(json.dumps({k: v for k, v in cf.items() if k != "trail"}), encoding="utf-8")
    out = run("casefile", "--check", str(path), "--db", str(db))
    assert out.returncode == 1 and "cites no trail" in out.stdout
    out = run("casefile", flagged, "--check", str(path), "--db", str(db))
    assert out.returncode == 2 and "give only the case file" in out.stderr
