"""Schema migrations, applied in order inside one write transaction.

Each migration is a function of a sqlite-utils Database; the number of applied
migrations is kept in `schema_version`. Never edit a released migration: add
a new one.
"""
from __future__ import annotations

import sqlite_utils

from ..errors import SchemaTooNew


def _v1(db: sqlite_utils.Database) -> None:
    db["keys"].create({"id": int, "label": str, "role": str, "key_hash": str, "prefix": str,
                       "created_at": str, "revoked_at": str}, pk="id",
                      not_null={"label", "role", "key_hash", "created_at"})
    db["keys"].create_index(["key_hash"], unique=True)
    db["facilities"].create({"facility_id": str, "name": str, "plan": str, "created_at": str,
                             "current_cycle": int}, pk="facility_id",
                            not_null={"name", "plan", "created_at", "current_cycle"})
    db["facilities"].create_index(["plan"])
    db["cycles"].create({
        "facility_id": str, "cycle": int, "plan_name": str, "plan_json": str, "status": str,
        "units": int, "nonconforming": int, "llr": float, "opened_at": str,
        "decided_seq": int, "decided_at": str, "decided_after_units": int, "at_cap": int,
        "closed_at": str, "closed_reason": str, "closed_seq": int, "last_record_at": str,
        "record_count": int,
    }, pk=("facility_id", "cycle"),
        not_null={"plan_name", "plan_json", "status", "units", "nonconforming", "llr",
                  "opened_at", "record_count"},
        defaults={"units": 0, "nonconforming": 0, "llr": 0.0, "at_cap": 0, "record_count": 0})
    db["cycles"].create_index(["status"])
    db["records"].create({
        "seq": int, "record_id": str, "facility_id": str, "cycle": int, "observed_at": str,
        "observed_utc": str, "received_at": str, "units": int, "nonconforming": int,
        "unit_ref": str, "inspector": str, "note": str, "content_hash": str, "counted": int,
        "void": int, "voided_at": str, "voided_by": str, "void_reason": str, "key_label": str,
    }, pk="seq", not_null={"record_id", "facility_id", "cycle", "observed_at", "received_at",
                           "units", "nonconforming", "content_hash", "counted", "void"},
        defaults={"void": 0})
    db["records"].create_index(["record_id"], unique=True)
    db["records"].create_index(["facility_id", "cycle", "seq"])
    db["alerts"].create({"alert_id": int, "kind": str, "facility_id": str, "cycle": int,
                         "created_at": str, "state": str, "detail": str, "acked_at": str,
                         "acked_by": str, "ack_note": str}, pk="alert_id",
                        not_null={"kind", "facility_id", "created_at", "state", "detail"})
    db["alerts"].create_index(["state", "kind"])
    db["alerts"].create_index(["facility_id"])
    db["actions"].create({"id": int, "at": str, "key_label": str, "role": str, "action": str,
                          "facility_id": str, "cycle": int, "target": str, "detail": str},
                         pk="id", not_null={"at", "action", "detail"})
    db["actions"].create_index(["facility_id", "cycle"])
    db["counters"].create({"name": str, "value": int}, pk="name", not_null={"value"})


def _v2(db: sqlite_utils.Database) -> None:
    """Webhook subscriptions, the outbox written with each alert, delivery attempts, job leases."""
    db["webhooks"].create({"id": int, "url": str, "secret": str, "kinds": str, "created_at": str,
                           "disabled_at": str, "disabled_reason": str}, pk="id",
                          not_null={"url", "secret", "kinds", "created_at"})
    db["outbox"].create({"id": int, "webhook_id": int, "alert_id": int, "msg_id": str,
                         "event_type": str, "payload": str, "status": str, "attempts": int,
                         "created_at": str, "window_start": str, "next_attempt_at": str,
                         "delivered_at": str, "last_error": str}, pk="id",
                        not_null={"webhook_id", "alert_id", "msg_id", "payload", "status",
                                  "attempts", "created_at", "window_start"},
                        defaults={"attempts": 0})
    db["outbox"].create_index(["status", "next_attempt_at"])
    db["outbox"].create_index(["webhook_id", "id"])
    db["outbox"].create_index(["msg_id"], unique=True)
    db["delivery_attempts"].create({"id": int, "outbox_id": int, "at": str, "status_code": int,
                                    "error": str, "duration_ms": float}, pk="id",
                                   not_null={"outbox_id", "at"})
    db["delivery_attempts"].create_index(["outbox_id"])
    db["leases"].create({"name": str, "holder": str, "expires_at": float}, pk="name",
                        not_null={"holder", "expires_at"})
    db["job_runs"].create({"job": str, "tick": int, "holder": str, "started_at": str,
                           "finished_at": str, "outcome": str}, pk=("job", "tick"),
                          not_null={"holder", "started_at"})


def _v3(db: sqlite_utils.Database) -> None:
    """Dashboard sign-in sessions (the cookie holds a random token; only its hash is kept)."""
    db["ui_sessions"].create({"token_hash": str, "key_id": int, "csrf": str, "created_at": str,
                              "expires_at": float}, pk="token_hash",
                             not_null={"key_id", "csrf", "created_at", "expires_at"})


def _v4(db: sqlite_utils.Database) -> None:
    """Records lose their content hash: a retried record is compared with the stored one
    column by column, which is exact and spares hashing every record on the ingest path."""
    db.execute("ALTER TABLE records DROP COLUMN content_hash")


def _v5(db: sqlite_utils.Database) -> None:
    """Facilities get an optional region (the audit program can be limited to one)."""
    db.execute("ALTER TABLE facilities ADD COLUMN region TEXT")
    db.execute("CREATE INDEX idx_facilities_region ON facilities (region)")


def _v6(db: sqlite_utils.Database) -> None:
    """Frames of the units a facility passed, RFC 3797 draws from them (one row per drawn
    unit, with the record that re-checked it), and each record's mark of the drawn unit."""
    db["frames"].create({"frame_id": int, "facility_id": str, "label": str, "period_start": str,
                         "period_end": str, "size": int, "sha256": str, "canonical": str,
                         "duplicates": str, "created_at": str, "created_by": str},
                        pk="frame_id",
                        not_null={"facility_id", "label", "period_start", "period_end", "size",
                                  "sha256", "canonical", "duplicates", "created_at"})
    db["frames"].create_index(["facility_id"])
    db["draws"].create({"draw_id": int, "facility_id": str, "cycle": int, "frame_id": int,
                        "size": int, "seed": str, "key": str, "created_at": str,
                        "created_by": str}, pk="draw_id",
                       not_null={"facility_id", "cycle", "frame_id", "size", "seed", "key",
                                 "created_at"})
    db["draws"].create_index(["facility_id", "cycle"])
    db["draw_units"].create({"draw_id": int, "draw_order": int, "frame_position": int,
                             "unit_ref": str, "facility_id": str, "cycle": int,
                             "record_seq": int}, pk=("draw_id", "draw_order"),
                            not_null={"frame_position", "unit_ref", "facility_id", "cycle"})
    db["draw_units"].create_index(["facility_id", "cycle", "unit_ref"])
    db["draw_units"].create_index(["record_seq"])
    db["records"].add_column("draw_id", int)
    db["records"].add_column("draw_order", int)
    db["records"].add_column("excluded", str)


def _v7(db: sqlite_utils.Database) -> None:
    """The watch chart of a cleared cycle (state 'watching' or 'signalled', S, units and
    nonconforming units charted, the peak, and the record and time of a signal)."""
    for column, kind in (("watch_state", "TEXT"), ("watch_value", "INTEGER"),
                         ("watch_units", "INTEGER"), ("watch_nonconforming", "INTEGER"),
                         ("watch_peak", "INTEGER"), ("watch_signal_seq", "INTEGER"),
                         ("watch_signal_at", "TEXT")):
        db.execute(f"ALTER TABLE cycles ADD COLUMN {column} {kind}")


def _v8(db: sqlite_utils.Database) -> None:
    """Alerts carry needs_review (service.alerting.needs_review at insert time): clears and
    cap notices, kinds that only inform, are backfilled to 0."""
    db.execute("ALTER TABLE alerts ADD COLUMN needs_review INTEGER NOT NULL DEFAULT 1")
    db.execute("UPDATE alerts SET needs_review = 0 WHERE kind IN ('cleared', 'cap_reached')")
    db.execute("CREATE INDEX IF NOT EXISTS alerts_queue ON alerts (state, needs_review, "
               "alert_id)")


def _v9(db: sqlite_utils.Database) -> None:
    """Findings: what the review of a decided cycle found (several per cycle)."""
    db["findings"].create({"id": int, "facility_id": str, "cycle": int, "outcome": str,
                           "note": str, "at": str, "key_label": str, "role": str}, pk="id",
                          not_null={"facility_id", "cycle", "outcome", "at"})
    db["findings"].create_index(["facility_id", "cycle", "id"])


def _v10(db: sqlite_utils.Database) -> None:
    """The tamper-evident trail (service/store/trail.py), with entries for the rows already
    there (records, voids, alerts, actions, in that order); keys get an optional expiry."""
    from .trail import backfill

    db.execute("CREATE TABLE trail (n INTEGER PRIMARY KEY, at TEXT NOT NULL, kind TEXT NOT NULL, "
               "ref TEXT, content TEXT, prev_sha256 TEXT NOT NULL, entry_sha256 TEXT NOT NULL)")
    # records are found through records.trail_n (the number of their job's entry)
    db.execute("CREATE INDEX trail_kind_ref ON trail (kind, ref) WHERE kind != 'records'")
    db.execute("ALTER TABLE records ADD COLUMN trail_n INTEGER")
    db.execute("ALTER TABLE keys ADD COLUMN expires_at TEXT")
    backfill(db.conn)


def _v11(db: sqlite_utils.Database) -> None:
    """Listing columns kept up to date on write, so a page of facilities costs about the same
    at 100,000 facilities as at 10,000: which cycle is a facility's current one
    (``is_current``), where its LLR lies between the boundaries (``llr_position``, 0 at the
    lower and 1 at the upper one; indexed over current cycles for the overview's order), and
    the number of facilities per plan and shown status of their current cycle
    (``facility_counts``, kept by triggers, so no page counts the whole table). The shown
    status is the cycle's status, except that a cleared cycle under its watch chart shows
    as ``watching``."""
    db.execute("ALTER TABLE cycles ADD COLUMN is_current INTEGER NOT NULL DEFAULT 0")
    db.execute("ALTER TABLE cycles ADD COLUMN llr_position REAL")
    db.execute("UPDATE cycles SET is_current = 1 WHERE cycle = (SELECT f.current_cycle FROM "
               "facilities f WHERE f.facility_id = cycles.facility_id)")
    db.execute("UPDATE cycles SET llr_position = (llr - json_extract(plan_json, '$.lower_llr'))"
               " / (json_extract(plan_json, '$.upper_llr') - json_extract(plan_json, "
               "'$.lower_llr'))")
    db.execute("CREATE INDEX cycles_current_position ON cycles (llr_position, facility_id) "
               "WHERE is_current = 1")
    db.execute("CREATE TABLE facility_counts (plan TEXT NOT NULL, status TEXT NOT NULL, "
               "n INTEGER NOT NULL, PRIMARY KEY (plan, status))")
    shown = ("CASE WHEN {row}.status = 'cleared' AND {row}.watch_state IS 'watching' "
             "THEN 'watching' ELSE {row}.status END")
    db.execute("INSERT INTO facility_counts (plan, status, n) SELECT f.plan, "
               + shown.format(row="c") + ", COUNT(*) FROM facilities f JOIN cycles c ON "
               "c.facility_id = f.facility_id AND c.is_current = 1 GROUP BY 1, 2")
    plan_of = "(SELECT f.plan FROM facilities f WHERE f.facility_id = {row}.facility_id)"
    add = ("INSERT INTO facility_counts (plan, status, n) SELECT " + plan_of.format(row="NEW")
           + ", " + shown.format(row="NEW") + ", 1 WHERE NEW.is_current = 1 "
           "ON CONFLICT (plan, status) DO UPDATE SET n = n + 1;")
    db.execute("CREATE TRIGGER cycles_counted_insert AFTER INSERT ON cycles "
               "WHEN NEW.is_current = 1 BEGIN " + add + " END")
    db.execute("CREATE TRIGGER cycles_counted_update AFTER UPDATE OF status, is_current, "
               "watch_state ON cycles WHEN " + shown.format(row="OLD") + " IS NOT "
               + shown.format(row="NEW") + " OR OLD.is_current IS NOT NEW.is_current "
               "BEGIN UPDATE facility_counts SET n = n - 1 WHERE OLD.is_current = 1 AND "
               "status = " + shown.format(row="OLD") + " AND plan = "
               + plan_of.format(row="OLD") + "; " + add + " END")


def _v12(db: sqlite_utils.Database) -> None:
    """Record ids found through ``record_keys`` (ordered by id, merged from the newest records
    in batches) instead of a unique index on ``records.record_id``, which random ids made
    cost a written page per record (see :mod:`.record_keys`)."""
    db.execute("CREATE TABLE record_keys (record_id TEXT PRIMARY KEY, seq INTEGER NOT NULL) "
               "WITHOUT ROWID")
    db.execute("INSERT INTO record_keys (record_id, seq) SELECT record_id, seq FROM records "
               "ORDER BY record_id")
    db.execute("CREATE TABLE record_keys_merged (upto INTEGER NOT NULL)")
    db.execute("INSERT INTO record_keys_merged (upto) SELECT COALESCE(MAX(seq), 0) FROM records")
    db.execute("DROP INDEX idx_records_record_id")


def _v13(db: sqlite_utils.Database) -> None:
    """Plan snapshots stored once each (``plan_snapshots``), cycles pointing at theirs by
    ``plan_ref``: a cycle row shrinks from about 420 to 110 bytes, and ingest rewrites one row
    per facility a batch touches, so a batch spread over many facilities writes a quarter of
    the pages it did. ``cycles_planned`` is a cycle row with its snapshot's text, as
    ``plan_json``."""
    db.execute("CREATE TABLE plan_snapshots (ref INTEGER PRIMARY KEY, "
               "plan_json TEXT NOT NULL UNIQUE)")
    db.execute("INSERT INTO plan_snapshots (plan_json) SELECT plan_json FROM cycles "
               "GROUP BY plan_json ORDER BY MIN(rowid)")
    db.execute("ALTER TABLE cycles ADD COLUMN plan_ref INTEGER REFERENCES plan_snapshots (ref)")
    db.execute("UPDATE cycles SET plan_ref = (SELECT p.ref FROM plan_snapshots p WHERE "
               "p.plan_json = cycles.plan_json)")
    db.execute("ALTER TABLE cycles DROP COLUMN plan_json")
    db.execute("CREATE VIEW cycles_planned AS SELECT c.*, p.plan_json FROM cycles c "
               "JOIN plan_snapshots p ON p.ref = c.plan_ref")
    # a cycle without its snapshot would drop out of the view (ALTER TABLE cannot add the
    # column as NOT NULL without a default)
    for event in ("INSERT", "UPDATE OF plan_ref"):
        db.execute(f"CREATE TRIGGER cycles_plan_ref_{event.split()[0].lower()} BEFORE {event} "
                   "ON cycles WHEN NEW.plan_ref IS NULL OR NOT EXISTS (SELECT 1 FROM "
                   "plan_snapshots p WHERE p.ref = NEW.plan_ref) BEGIN SELECT RAISE(ABORT, "
                   "'a cycle needs the number of a stored plan snapshot (plan_ref)'); END")


MIGRATIONS = [_v1, _v2, _v3, _v4, _v5, _v6, _v7, _v8, _v9, _v10, _v11, _v12, _v13]


def migrate(db: sqlite_utils.Database) -> int:
    """Apply the migrations not yet applied; the caller holds a write transaction.

    Raises :class:`SchemaTooNew` for a file whose schema is newer than this build knows
    (an older build would fail on it query by query, or write rows a newer one misreads)."""
    db.execute("CREATE TABLE IF NOT EXISTS schema_version (version INTEGER NOT NULL)")
    row = db.execute("SELECT MAX(version) FROM schema_version").fetchone()
    current = row[0] or 0
    if current > len(MIGRATIONS):
        raise SchemaTooNew(f"the database is at schema version {current}, newer than this "
                           f"build of seqaudit knows ({len(MIGRATIONS)}); run the newer "
                           "build, or restore a backup made before it")
    for number, step in enumerate(MIGRATIONS, start=1):
        if number > current:
            step(db)
            db.execute("INSERT INTO schema_version (version) VALUES (?)", [number])
    return len(MIGRATIONS)
