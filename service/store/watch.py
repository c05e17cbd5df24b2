"""The watch chart's state on a cleared cycle, and the new cycle a signal opens.

A mixin of :class:`service.store.Store`: all SQL stays in this package. The
chart itself is the pure :func:`service.watching.apply_units`; its weight and
limit travel in the cycle's plan snapshot (key ``watch``), so editing the
configuration never changes a chart already running.
"""
from __future__ import annotations

import json

from ..alerting import AlertDraft, watch_signal_alert
from ..monitor import CycleState
from ..watching import Chart, WatchState, apply_units, replay

WATCHING = "watching"
SIGNALLED = "signalled"

_CHARTS: dict[str, Chart | None] = {}


def chart_of(plan_json: str) -> Chart | None:
    """The chart of a cycle's plan snapshot text (None without a watch), built once per text."""
    try:
        return _CHARTS[plan_json]
    except KeyError:
        pass
    if len(_CHARTS) >= 1024:
        _CHARTS.clear()
    w = json.loads(plan_json).get("watch")
    chart = _CHARTS[plan_json] = None if w is None else Chart(int(w["m"]), int(w["t"]))
    return chart


def watch_state_of(row: dict) -> WatchState:
    return WatchState(row.get("watch_value") or 0, row.get("watch_units") or 0,
                      row.get("watch_nonconforming") or 0, row.get("watch_peak") or 0)


def _running_units(recs) -> list[int]:
    out, total = [], 0
    for r in recs:
        total += r["units"]
        out.append(total)
    return out


class WatchMixin:
    @staticmethod
    def _start_watch(cyc: dict) -> bool:
        """A cycle just cleared: start its chart at zero if its plan has one."""
        if cyc["_state"].status != "cleared" or chart_of(cyc["plan_json"]) is None:
            return False
        cyc.update(watch_state=WATCHING, watch_value=0, watch_units=0, watch_nonconforming=0,
                   watch_peak=0, watch_signal_seq=None, watch_signal_at=None, _watch_dirty=True)
        return True

    @staticmethod
    def _feed_watch(cyc: dict, seqs, units, bad, record_ids,
                    now) -> tuple[int, AlertDraft | None]:
        """Chart the post-decision records of a watched cycle, in receipt order.

        Returns (records charted, the watch_signal alert or None); the fold stops at the
        record whose units reach the limit.
        """
        chart = chart_of(cyc["plan_json"])
        state = watch_state_of(cyc)
        for i in range(len(seqs)):
            state, signal = apply_units(chart, state, units[i], bad[i])
            if signal is not None:
                cyc.update(watch_state=SIGNALLED, watch_signal_seq=seqs[i], watch_signal_at=now)
                alert = watch_signal_alert(cyc["facility_id"], cyc["cycle"], cyc["plan_name"],
                                           json.loads(cyc["plan_json"]), signal.value,
                                           signal.after_units, state.nonconforming,
                                           record_ids[i])
                break
        else:
            i, alert = len(seqs) - 1, None
        cyc.update(watch_value=state.value, watch_units=state.units,
                   watch_nonconforming=state.nonconforming, watch_peak=state.peak,
                   _watch_dirty=True)
        return i + 1, alert

    @staticmethod
    def _write_watch(conn, cyc: dict) -> None:
        if not cyc.get("_watch_dirty"):
            return
        conn.execute("UPDATE cycles SET watch_state = ?, watch_value = ?, watch_units = ?, "
                     "watch_nonconforming = ?, watch_peak = ?, watch_signal_seq = ?, "
                     "watch_signal_at = ? WHERE facility_id = ? AND cycle = ?",
                     (cyc["watch_state"], cyc["watch_value"], cyc["watch_units"],
                      cyc["watch_nonconforming"], cyc["watch_peak"], cyc["watch_signal_seq"],
                      cyc["watch_signal_at"], cyc["facility_id"], cyc["cycle"]))
        cyc["_watch_dirty"] = False

    def _open_after_signal(self, conn, cyc: dict, now: str) -> dict:
        """The watched cycle signalled: open the next cycle at once, same plan snapshot."""
        fid, new = cyc["facility_id"], cyc["cycle"] + 1
        snapshot = json.loads(cyc["plan_json"])
        self._insert_cycle(conn, fid, new, cyc["plan_name"], snapshot, now)
        conn.execute("UPDATE facilities SET current_cycle = ? WHERE facility_id = ?", (new, fid))
        self._log(conn, now, ("watch", "system"), "cycle_opened",
                  {"previous_status": "cleared", "reason": "watch_signal",
                   "signal_cycle": cyc["cycle"]}, facility_id=fid, cycle=new)
        row = self._cycle_row(conn, fid, new)
        row["_plan"] = cyc["_plan"]
        row["_state"] = CycleState()
        return row

    @staticmethod
    def _cycle_row(conn, facility_id: str, cycle: int) -> dict:
        cur = conn.execute("SELECT * FROM cycles_planned WHERE facility_id = ? AND cycle = ?",
                           (facility_id, cycle))
        names = [c[0] for c in cur.description]
        return dict(zip(names, cur.fetchone()))

    def watch_path(self, facility_id: str, cycle: int) -> dict | None:
        """The chart of a cleared cycle replayed from its post-decision records: the value
        after each record charted (with its seq), the limit, and the stored state."""
        rows = self.read("SELECT * FROM cycles_planned WHERE facility_id = ? AND cycle = ?",
                         (facility_id, cycle))
        if not rows or rows[0]["watch_state"] is None:
            return None
        cyc = rows[0]
        chart = chart_of(cyc["plan_json"])
        recs = self.read("SELECT seq, record_id, units, nonconforming FROM records WHERE "
                         "facility_id = ? AND cycle = ? AND void = 0 AND excluded IS NULL AND seq > ? "
                         "ORDER BY seq",
                         (facility_id, cycle, cyc["decided_seq"]))
        if cyc["watch_signal_seq"] is not None:
            recs = [r for r in recs if r["seq"] <= cyc["watch_signal_seq"]]
        state, path, signal = replay(chart, [(r["units"], r["nonconforming"]) for r in recs])
        return {"m": chart.m, "t": chart.t, "state": cyc["watch_state"],
                "value": cyc["watch_value"], "units": cyc["watch_units"],
                "nonconforming": cyc["watch_nonconforming"], "peak": cyc["watch_peak"],
                "signal_seq": cyc["watch_signal_seq"], "signal_at": cyc["watch_signal_at"],
                "points": [{"seq": r["seq"], "record_id": r["record_id"], "value": v,
                            "units": u} for r, v, u in zip(recs, path, _running_units(recs))],
                "replayed": state._asdict(), "replay_signalled": signal is not None}

    def _rewatch_after_void(self, conn, cyc: dict, state: CycleState, live: list[dict],
                            is_current: bool, now: str) -> list[AlertDraft]:
        """After a void replayed the cycle: the chart is replayed from the live records
        after the (possibly new) clear. A chart that already signalled stays as it was (its
        new cycle is open); a cycle no longer cleared loses its chart. Returns the alerts
        (a watch_signal when the replayed chart reaches the limit on the current cycle)."""
        chart = chart_of(cyc["plan_json"])
        if chart is None or cyc.get("watch_state") == SIGNALLED:
            return []
        if state.status != "cleared":
            if cyc.get("watch_state") is not None:
                cyc.update(watch_state=None, watch_value=None, watch_units=None,
                           watch_nonconforming=None, watch_peak=None, watch_signal_seq=None,
                           watch_signal_at=None, _watch_dirty=True)
            return []
        cyc["_state"] = state
        self._start_watch(cyc)
        after = [r for r in live if r["seq"] > state.decided_seq]
        if not after:
            return []
        ids = dict(conn.execute(
            "SELECT seq, record_id FROM records WHERE facility_id = ? AND cycle = ? AND seq > ?",
            (cyc["facility_id"], cyc["cycle"], state.decided_seq)).fetchall())
        used, alert = self._feed_watch(cyc, [r["seq"] for r in after],
                                       [r["units"] for r in after],
                                       [r["nonconforming"] for r in after],
                                       [ids[r["seq"]] for r in after], now)
        if alert is None:
            return []
        if not is_current:       # a later cycle is already open: the signal is recorded only
            return [alert]
        self._write_watch(conn, cyc)
        self._open_after_signal(conn, cyc, now)
        return [alert]
