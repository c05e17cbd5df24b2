"""Inspection records: ingest (group commit), a cycle's records, a record by its id (voids
are in :mod:`.voids`)."""
from __future__ import annotations

import operator
import sqlite3
from typing import NamedTuple

from ..alerting import decision_alerts
from ..errors import NotFound
from ..record_checks import observation_note, old_limit
from ..monitor import Evidence, apply_run, llr_path
from .common import plan_of, where_in
from .frames import PLAIN, DrawMarks
from .ingest_cycles import UPDATE_COUNTS_AT, UPDATE_STATE_AT, KeptCycles, cycle_writes
from .group_commit import Job
from .record_keys import DuplicateKey, RecentKeys
from .trail import append_records, head


class RecordIn(NamedTuple):
    """A validated record as posted (observed_utc is the normalised instant).

    A named tuple, like the other per-record values: cheap to build a thousand times a request.
    """

    record_id: str
    facility_id: str
    observed_at: str
    observed_utc: str
    units: int
    nonconforming: int
    unit_ref: str | None = None
    inspector: str | None = None
    note: str | None = None

    def content(self) -> tuple:
        """What must match for a record with a known id to be a retry of the stored one
        (the instant, not how it was written)."""
        return (self.facility_id, self.observed_utc, self.units, self.nonconforming,
                self.unit_ref, self.inspector, self.note)


# The columns of a stored record that RecordIn.content() compares, in the same order.
_CONTENT_COLUMNS = "facility_id, observed_utc, units, nonconforming, unit_ref, inspector, note"


class IngestOutcome(NamedTuple):
    """What became of one record; ingest returns them in the order of its items."""

    record_id: str
    status: str                 # accepted | duplicate | conflict | invalid
    seq: int | None = None
    facility_id: str | None = None
    detail: str | None = None
    field: str | None = None
    note: str | None = None     # accepted, worth a look: service.record_checks' codes


_INSERT_RECORDS = (
    "INSERT INTO records (seq, record_id, facility_id, cycle, observed_at, observed_utc, "
    "received_at, units, nonconforming, unit_ref, inspector, note, counted, key_label, void, "
    "draw_id, draw_order, excluded, trail_n) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 0, "
    "?, ?, ?, ?)")
# An insert row (above) -> the record's trail content, in trail_hash.RECORD_FIELDS order.
_TRAIL_ROW = operator.itemgetter(3, 14, 15, 16, 2, 10, 13, 8, 11, 4, 5, 6, 1, 0, 9, 7)

# The sqlite3 module binds a None parameter only after a failed adapter lookup that raises
# and formats two AttributeErrors (about 0.4 us each; records carry several None fields).
# With an adapter registered for None the lookup succeeds and None still binds as NULL.
# None is not a base type, so this keeps the module's fast path for int, float and str.
sqlite3.register_adapter(type(None), lambda value: None)


class RecordsMixin:
    def ingest(self, items: list[RecordIn], key_label: str | None, now: str,
               rejected_before: int = 0) -> list[IngestOutcome]:
        """Store a batch of validated records durably; returns one outcome per record.

        Per record: a new id is evidence for the facility's current cycle (or a
        post-decision record if the cycle has stopped); the same id with the same
        content is a duplicate and is not counted again; the same id with other
        content is a conflict. ``rejected_before`` counts records of the request
        that failed validation, for the metrics (``items`` may be empty).

        This blocking form commits in the calling thread (imports, the demo, scripts);
        it returns once the records are committed. Never call it inside :meth:`write`.
        """
        job = Job(items, key_label, now, rejected_before)
        self._commit_group(lambda: [job])
        while self._after_commit():     # a blocking caller may wait for a whole merge
            pass
        return job.result()

    async def ingest_async(self, items: list[RecordIn], key_label: str | None, now: str,
                           rejected_before: int = 0) -> list[IngestOutcome]:
        """:meth:`ingest` for request handlers on an event loop, with group commit
        (:mod:`.group_commit`): the store's writer thread commits every request waiting at
        that moment in one transaction (one fsync); each caller is answered only after its
        records are committed."""
        job = await self._committer.run_async(Job(items, key_label, now, rejected_before))
        return job.result()

    def _commit_group(self, take) -> None:
        """On the writer thread: once this process's turn to write has come, every job
        waiting then (``take()``) in one transaction, or each alone if that fails."""
        with self._writer, self._file_lock:
            jobs = take()
            try:
                with self._begun() as conn:
                    for j in jobs:
                        j.outcomes = self._ingest_tx(conn, j)
            except Exception:
                KeptCycles.forget(self)       # rolled back: the kept cycles ran ahead
                RecentKeys.forget(self)       # and so did the ids taken into the tail
                # something failed: commit each job alone, so one cannot sink the others
                for j in jobs:
                    j.outcomes = None
                    try:
                        with self._begun() as conn:
                            j.outcomes = self._ingest_tx(conn, j)
                    except Exception as exc:  # reported to that job's caller only
                        KeptCycles.forget(self)
                        RecentKeys.forget(self)
                        j.error = exc
            except BaseException:
                KeptCycles.forget(self)
                RecentKeys.forget(self)
                raise

    def _ingest_tx(self, conn, job: Job) -> list[IngestOutcome]:
        """One job's records, inside the write transaction the caller holds."""
        items, key_label, now = job.items, job.key_label, job.now
        recent = RecentKeys.of(self)
        recent.catch_up(conn)
        stored = self._stored_content(conn, recent, list({it.record_id for it in items}))
        kept = KeptCycles.of(self, conn)
        cycles = kept.cycles_for(conn, {it.facility_id for it in items})
        seq = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM records").fetchone()[0]
        marks = DrawMarks(conn, items, cycles)              # drawn units of open cycles
        plain = marks.plain             # no record of this job can meet a draw
        oldest = old_limit(now)
        trail_n, trail_prev = head(conn)      # this job's records become the next entry
        batch: dict[str, tuple[RecordIn, int]] = {}     # ids first seen in this job
        # facility -> the positions in ``inserts`` of its new evidence records (one list per
        # facility: a batch spread over 1000 facilities makes 1000 of them)
        runs: dict[str, list[int]] = {}
        inserts, alerts, outcomes = [], [], []
        duplicates = rejected = 0
        for it in items:
            # one unpacking instead of a dozen attribute reads (it runs once per record)
            rid, fid, observed_at, utc, units, bad, unit_ref, inspector, note = it
            earlier = batch.get(rid)
            if earlier is not None:
                same, old_seq, old_fid = (earlier[0].content() == it.content(), earlier[1],
                                          earlier[0].facility_id)
            elif rid in stored:
                old_content, old_seq = stored[rid]
                same, old_fid = old_content == it.content(), old_content[0]
            else:
                same = None
            if same is not None:
                if same:
                    duplicates += 1
                    outcomes.append(IngestOutcome(rid, "duplicate", old_seq, old_fid))
                else:
                    rejected += 1
                    outcomes.append(IngestOutcome(
                        rid, "conflict", old_seq, old_fid, f"record_id {rid!r} was "
                        "already used for a record with different content; use a new "
                        "record_id for a new record", "record_id"))
                continue
            cyc = cycles.get(fid)
            if cyc is None:
                rejected += 1
                outcomes.append(IngestOutcome(rid, "invalid", None, None,
                                              f"no facility {fid!r} is registered",
                                              "facility_id"))
                continue
            if plain:
                draw_id = order = excluded = None
            else:
                draw_id, order, excluded, conflict = unit = marks.check(it, cyc)
                if conflict is not None:        # a drawn unit counts once
                    rejected += 1
                    outcomes.append(IngestOutcome(rid, "conflict", None, fid, conflict,
                                                  "unit_ref"))
                    continue
            seq += 1
            if draw_id is not None:
                marks.take(it, unit, seq)
            if excluded is None:
                run = runs.get(fid)
                if run is None:
                    runs[fid] = [len(inserts)]
                else:
                    run.append(len(inserts))
            else:       # kept and shown, but not evidence under the plan's draw rule
                cyc["record_count"] += 1
                cyc["last_record_at"] = now
                runs.setdefault(fid, [])
            inserts.append((seq, rid, fid, cyc["cycle"], observed_at, utc, now, units, bad,
                            unit_ref, inspector, note, int(excluded is None), key_label,
                            draw_id, order, excluded, trail_n + 1))
            batch[rid] = (it, seq)
            opened = cyc["opened_at"]
            outcomes.append(IngestOutcome(rid, "accepted", seq, fid, None, None,
                                          None if utc >= oldest and utc >= opened
                                          else observation_note(utc, opened, oldest)))
        # each facility's new records in receipt order, as one run through the pure update
        decided, touched, signals = [], [], []
        for fid, positions in runs.items():
            cyc = cycles[fid]
            touched.append(cyc)
            if len(positions) == 1:             # (most facilities of a widely spread batch)
                row = inserts[positions[0]]
                seqs, units, bad = [row[0]], [row[7]], [row[8]]
            else:
                rows = [inserts[p] for p in positions]
                seqs, units, bad = ([r[0] for r in rows], [r[7] for r in rows],
                                    [r[8] for r in rows])
            while True:
                state, decision, counted = apply_run(cyc["_plan"], cyc["_state"], seqs, units,
                                                     bad, now)
                cyc["_state"] = state
                cyc["record_count"] += len(positions)
                cyc["last_record_at"] = now
                if decision is None and counted == len(seqs):
                    break                       # the common case: all evidence, undecided
                for p in positions[counted:]:   # kept, but the cycle had stopped: not evidence
                    row = inserts[p]
                    inserts[p] = row[:12] + (0,) + row[13:]
                if decision is not None:
                    decided.append((seqs[counted - 1], cyc, state,
                                    inserts[positions[counted - 1]][1]))
                    self._start_watch(cyc)
                if cyc.get("watch_state") != "watching" or counted == len(seqs):
                    break
                # after a clear, the post-decision records feed the watch chart
                used, signal = self._feed_watch(cyc, seqs[counted:], units[counted:],
                                                bad[counted:], [inserts[p][1] for p in
                                                                positions[counted:]], now)
                if signal is None:
                    break
                signals.append((seqs[counted + used - 1], signal))
                rest = counted + used           # later records go to the new cycle
                cyc["record_count"] -= len(positions) - rest
                cyc = self._open_after_signal(conn, cyc, now)
                touched.append(cyc)
                positions, seqs, units, bad = (positions[rest:], seqs[rest:], units[rest:],
                                               bad[rest:])
                for p in positions:             # evidence of the new cycle unless it stops
                    row = inserts[p]
                    inserts[p] = row[:3] + (cyc["cycle"],) + row[4:12] + (1,) + row[13:]
                if not positions:
                    break
        now_head = head(conn) if inserts else (trail_n, trail_prev)
        if now_head[0] != trail_n:      # entries appended meanwhile (a cycle opened by a signal)
            trail_n, trail_prev = now_head
            inserts = [row[:-1] + (trail_n + 1,) for row in inserts]
        conn.executemany(_INSERT_RECORDS, inserts)
        recent.add((row[1], row[0]) for row in inserts)     # the next job of this commit
        marks.save(conn)
        if inserts:
            append_records(conn, trail_n, trail_prev, list(map(_TRAIL_ROW, inserts)), now)
        # the cycles' new states: one statement for all whose status stayed, one for the rest
        counts, states = cycle_writes(conn, touched, kept)
        conn.executemany(UPDATE_COUNTS_AT, counts)
        if states:
            conn.executemany(UPDATE_STATE_AT, states)
        for cyc in touched:
            if cyc.get("_watch_dirty"):
                self._write_watch(conn, cyc)
        ordered = [(seq, decision_alerts(cyc["facility_id"], cyc["cycle"], cyc["plan_name"],
                                         cyc["_plan"], state, rid))
                   for seq, cyc, state, rid in decided] + [(seq, [a]) for seq, a in signals]
        for _, more in sorted(ordered, key=lambda x: x[0]):   # alerts in record order
            alerts += more
        self._insert_alerts(conn, alerts, now)
        self._bump(conn, "records_accepted", len(inserts))
        self._bump(conn, "records_duplicate", duplicates)
        self._bump(conn, "records_rejected", rejected + job.rejected_before)
        kept.keep(conn)
        return outcomes

    @staticmethod
    def _stored_content(conn, recent: RecentKeys, ids: list[str]
                        ) -> dict[str, tuple[tuple, int]]:
        """record_id -> (content, seq) of the stored records among ``ids``."""
        seqs = recent.seqs(conn, ids)
        if not seqs:
            return {}
        # the id is read back too: a seq found for an id must hold a record of that id
        out = {rid: (tuple(content), seq) for seq, rid, *content in where_in(
            conn, f"SELECT seq, record_id, {_CONTENT_COLUMNS} FROM records WHERE seq IN "
                  "({marks})", list(seqs.values())) if seqs.get(rid) == seq}
        if len(out) < len(seqs):        # refuse the job rather than store an id twice
            rid = next(rid for rid in seqs if rid not in out)
            raise DuplicateKey(f"record_id {rid!r} is indexed as seq {seqs[rid]}, which holds "
                               "another record")
        return out

    def records(self, facility_id: str, cycle: int) -> list[dict]:
        """A cycle's records in evidence (receipt) order, voids included, with the LLR after each."""
        cyc = self.cycle(facility_id, cycle)
        rows = self.read("SELECT * FROM records WHERE facility_id = ? AND cycle = ? ORDER BY seq",
                         (facility_id, cycle))
        plan = plan_of(cyc["plan_json"])
        live = [r for r in rows if not r["void"]]
        evidence = [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                    for r in live]
        llrs = dict(zip((r["seq"] for r in live),
                        llr_path(plan, evidence, [bool(r["counted"]) for r in live])))
        for r in rows:
            r["llr_after"] = llrs.get(r["seq"])
        return rows

    def records_page(self, facility_id: str, cycle: int, limit: int | None, offset: int
                     ) -> tuple[list[dict], int]:
        """One page of a cycle's records in receipt order with the LLR after each, and the
        number of records (``limit`` None: all); time and memory grow with the page, not
        with the cycle (the LLR before the page is one sum in SQLite)."""
        cyc = self.cycle(facility_id, cycle)
        total = self.read("SELECT COUNT(*) AS n FROM records WHERE facility_id = ? AND "
                          "cycle = ?", (facility_id, cycle))[0]["n"]
        rows = self.read("SELECT * FROM records WHERE facility_id = ? AND cycle = ? ORDER BY "
                         "seq LIMIT ? OFFSET ?",
                         (facility_id, cycle, -1 if limit is None else limit, offset))
        if not rows:
            return rows, total
        units, bad = self._conn().execute(
            "SELECT COALESCE(SUM(units), 0), COALESCE(SUM(nonconforming), 0) FROM records "
            "WHERE facility_id = ? AND cycle = ? AND seq < ? AND void = 0 AND counted = 1",
            (facility_id, cycle, rows[0]["seq"])).fetchone()
        plan = plan_of(cyc["plan_json"])
        for r in rows:
            if r["counted"] and not r["void"]:
                units, bad = units + r["units"], bad + r["nonconforming"]
                r["llr_after"] = float(plan.llr(units, bad))
            else:
                r["llr_after"] = None
        return rows, total

    def record_path(self, facility_id: str, cycle: int) -> list[tuple[int, int, int, int]]:
        """(units, nonconforming, counted, void) of a cycle's evidence and void records in
        receipt order: what its chart draws (records after the decision are left out)."""
        return self._conn().execute(
            "SELECT units, nonconforming, counted, void FROM records WHERE facility_id = ? AND "
            "cycle = ? AND (counted = 1 OR void = 1) ORDER BY seq",
            (facility_id, cycle)).fetchall()

    def record(self, record_id: str) -> dict:
        rows = self.find_record(record_id)
        if not rows:
            raise NotFound(f"no record {record_id!r}")
        return rows[0]
