"""Voids: a record marked void, and its cycle replayed from the records still standing."""
from __future__ import annotations

from ..alerting import void_alerts
from ..errors import Conflict, NotFound
from ..monitor import CLOSED, CycleState, Evidence, replay
from .common import plan_of, rows_of, state_of
from .ingest_cycles import UPDATE_STATE, state_row
from .record_keys import RecentKeys
from .trail import append_entry, void_content


class VoidsMixin:
    @staticmethod
    def _write_state(conn, cyc: dict, state: CycleState, extra: dict | None = None) -> None:
        """One cycle's state (a void); ingest writes all its cycles with two executemany."""
        conn.execute(UPDATE_STATE, state_row(cyc, state))
        if extra:
            sets = ", ".join(f"{k} = ?" for k in extra)
            conn.execute(f"UPDATE cycles SET {sets} WHERE facility_id = ? AND cycle = ?",
                         [*extra.values(), cyc["facility_id"], cyc["cycle"]])

    def void_record(self, record_id: str, reason: str, now: str, actor) -> dict:
        """Mark a record void and replay its cycle from the records still standing."""
        with self.write() as conn:
            rows = RecentKeys.of(self).record(conn, record_id)
            if not rows:
                raise NotFound(f"no record {record_id!r}")
            rec = rows[0]
            if rec["void"]:
                raise Conflict(f"record {record_id!r} was already voided at {rec['voided_at']} by "
                               f"{rec['voided_by']}")
            conn.execute("UPDATE records SET void = 1, voided_at = ?, voided_by = ?, "
                         "void_reason = ? WHERE seq = ?", (now, actor[0], reason, rec["seq"]))
            # a drawn unit whose re-check is voided is again to be re-checked
            conn.execute("UPDATE draw_units SET record_seq = NULL WHERE record_seq = ?",
                         (rec["seq"],))
            append_entry(conn, "void", void_content(rec["seq"], record_id, now, actor[0],
                                                    reason), now, ref=rec["seq"])
            fid, number = rec["facility_id"], rec["cycle"]
            cyc = rows_of(conn.execute("SELECT * FROM cycles_planned WHERE facility_id = ? AND cycle = ?",
                                     (fid, number)))[0]
            current = conn.execute("SELECT current_cycle FROM facilities WHERE facility_id = ?",
                                   (fid,)).fetchone()[0]
            cyc["_plan"] = plan_of(cyc["plan_json"])
            before = state_of(cyc)
            standing = rows_of(conn.execute(
                "SELECT seq, units, nonconforming, received_at, excluded FROM records WHERE "
                "facility_id = ? AND cycle = ? AND void = 0 ORDER BY seq", (fid, number)))
            live = [r for r in standing if r["excluded"] is None]   # excluded: never evidence
            evidence = [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                        for r in live]
            state, counted = replay(cyc["_plan"], evidence, stop_seq=cyc["closed_seq"])
            extra = {}
            if state.is_open and cyc["closed_seq"] is not None:
                state = CycleState(status=CLOSED, units=state.units,
                                   nonconforming=state.nonconforming)
            elif state.is_open and number < current:
                state = CycleState(status=CLOSED, units=state.units,
                                   nonconforming=state.nonconforming)
                extra = {"closed_at": now, "closed_reason":
                         f"undecided after a void, and cycle {current} is already open"}
            conn.executemany("UPDATE records SET counted = ? WHERE seq = ?",
                             [(int(c), r["seq"]) for c, r in zip(counted, live)])
            cyc["record_count"] = len(standing)
            watch_alerts = self._rewatch_after_void(conn, cyc, state, live, number == current,
                                                    now)
            self._write_state(conn, cyc, state, extra)
            self._write_watch(conn, cyc)
            alerts = void_alerts(fid, number, cyc["plan_name"], cyc["_plan"], before, state,
                                 record_id, reason)
            revised = bool(alerts)
            alert_ids = self._insert_alerts(conn, alerts + watch_alerts, now)
            self._log(conn, now, actor, "record_voided",
                      {"record_id": record_id, "reason": reason, "decision_revised": revised},
                      facility_id=fid, cycle=number, target=record_id)
        return {"record": self.record(record_id), "revised": revised, "alert_ids": alert_ids}
