"""Frames of the units a facility passed, RFC 3797 draws from them, and the tablets'
assignments (the drawn units not yet re-checked).

A mixin of :class:`service.store.Store`: all SQL stays in this package. Frames and draws are
immutable once written; a drawn unit's ``record_seq`` is set when a record re-checks it (in
the ingest transaction) and cleared if that record is voided.
"""
from __future__ import annotations

import json
import operator

from ..draw_rule import DrawSlot, UnitCheck, check_unit
from ..errors import Conflict, Invalid, NotFound
from ..selection import CanonicalFrame, Draw
from ..stats import MONITORING
from .common import where_in


_FRAME_COLUMNS = ("frame_id, facility_id, label, period_start, period_end, size, sha256, "
                  "duplicates, created_at, created_by")


class FramesMixin:
    # -- frames ----------------------------------------------------------------
    def add_frame(self, facility_id: str, label: str, period_start: str, period_end: str,
                  frame: CanonicalFrame, now: str, actor) -> int:
        with self.write() as conn:
            if not conn.execute("SELECT 1 FROM facilities WHERE facility_id = ?",
                                (facility_id,)).fetchone():
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            cur = conn.execute(
                "INSERT INTO frames (facility_id, label, period_start, period_end, size, sha256, "
                "canonical, duplicates, created_at, created_by) VALUES (?, ?, ?, ?, ?, ?, ?, ?, "
                "?, ?)", (facility_id, label, period_start, period_end, frame.size, frame.sha256,
                          frame.text, json.dumps(list(frame.duplicates), ensure_ascii=False),
                          now, actor[0]))
            frame_id = cur.lastrowid
            self._log(conn, now, actor, "frame_registered",
                      {"frame_id": frame_id, "label": label, "size": frame.size,
                       "sha256": frame.sha256, "duplicates": len(frame.duplicates)},
                      facility_id=facility_id, target=str(frame_id))
        return frame_id

    @staticmethod
    def _frame_row(row: dict) -> dict:
        row["duplicates"] = json.loads(row["duplicates"])
        return row

    def frames(self, facility_id: str) -> list[dict]:
        return [self._frame_row(r) for r in self.read(
            f"SELECT {_FRAME_COLUMNS} FROM frames WHERE facility_id = ? ORDER BY frame_id",
            (facility_id,))]

    def frame(self, frame_id: int, with_text: bool = False) -> dict:
        columns = _FRAME_COLUMNS + (", canonical" if with_text else "")
        rows = self.read(f"SELECT {columns} FROM frames WHERE frame_id = ?", (frame_id,))
        if not rows:
            raise NotFound(f"no frame {frame_id}")
        return self._frame_row(rows[0])

    # -- draws -----------------------------------------------------------------
    def add_draw(self, facility_id: str, frame_id: int, seed: str, result: Draw,
                 frame_sha256: str, now: str, actor) -> int:
        """Store a draw computed from the frame ``frame_id`` (whose hash must still be
        ``frame_sha256``) for the facility's open cycle."""
        with self.write() as conn:
            row = conn.execute("SELECT f.current_cycle, c.status FROM facilities f JOIN cycles "
                               "c ON c.facility_id = f.facility_id AND c.cycle = "
                               "f.current_cycle WHERE f.facility_id = ?",
                               (facility_id,)).fetchone()
            if row is None:
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            cycle, status = row
            frame = conn.execute("SELECT facility_id, sha256 FROM frames WHERE frame_id = ?",
                                 (frame_id,)).fetchone()
            if frame is None or frame[0] != facility_id or frame[1] != frame_sha256:
                raise Invalid(f"frame {frame_id} is not a frame of {facility_id!r}",
                              field="frame_id")
            if status != MONITORING:
                raise Conflict(f"cycle {cycle} of {facility_id!r} is {status}: draws are made "
                               "for an open cycle; open the next cycle first")
            cur = conn.execute("INSERT INTO draws (facility_id, cycle, frame_id, size, seed, key, "
                               "created_at, created_by) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                               (facility_id, cycle, frame_id, len(result.units), seed,
                                result.key, now, actor[0]))
            draw_id = cur.lastrowid
            conn.executemany("INSERT INTO draw_units (draw_id, draw_order, frame_position, "
                             "unit_ref, facility_id, cycle) VALUES (?, ?, ?, ?, ?, ?)",
                             [(draw_id, i, p, u, facility_id, cycle) for i, (p, u) in
                              enumerate(zip(result.positions, result.units), start=1)])
            self._log(conn, now, actor, "draw_made",
                      {"draw_id": draw_id, "frame_id": frame_id, "size": len(result.units),
                       "seed": seed, "key": result.key,
                       "units": list(result.units)},
                      facility_id=facility_id, cycle=cycle, target=str(draw_id))
        return draw_id

    def draws(self, facility_id: str, cycle: int | None = None) -> list[dict]:
        """A facility's draws (newest first) with their frame's label and how many drawn
        units were re-checked."""
        where, params = "d.facility_id = ?", [facility_id]
        if cycle is not None:
            where += " AND d.cycle = ?"
            params.append(cycle)
        return self.read(
            "SELECT d.*, f.label AS frame_label, f.sha256 AS frame_sha256, f.size AS frame_size, "
            "(SELECT COUNT(*) FROM draw_units u WHERE u.draw_id = d.draw_id AND u.record_seq "
            f"IS NOT NULL) AS rechecked FROM draws d JOIN frames f ON f.frame_id = d.frame_id "
            f"WHERE {where} ORDER BY d.draw_id DESC", params)

    def draw(self, draw_id: int) -> dict:
        rows = self.read("SELECT d.*, f.label AS frame_label, f.sha256 AS frame_sha256, "
                         "f.size AS frame_size FROM draws d JOIN frames f ON f.frame_id = "
                         "d.frame_id WHERE d.draw_id = ?", (draw_id,))
        if not rows:
            raise NotFound(f"no draw {draw_id}")
        out = rows[0]
        out["units"] = self.read(
            "SELECT u.draw_order, u.frame_position, u.unit_ref, r.record_id, r.seq AS "
            "record_seq FROM draw_units u LEFT JOIN records r ON r.seq = u.record_seq "
            "WHERE u.draw_id = ? ORDER BY u.draw_order", (draw_id,))
        return out

    # -- assignments -----------------------------------------------------------
    def assignments(self) -> list[dict]:
        """Drawn units not yet re-checked, of facilities whose current cycle is open, in draw
        order (facility, draw, order)."""
        return self.read(
            "SELECT u.facility_id, u.draw_id, u.draw_order, u.unit_ref FROM facilities f "
            "JOIN cycles c ON c.facility_id = f.facility_id AND c.cycle = f.current_cycle "
            "JOIN draw_units u ON u.facility_id = f.facility_id AND u.cycle = c.cycle "
            "WHERE c.status = ? AND u.record_seq IS NULL "
            "ORDER BY u.facility_id, u.draw_id, u.draw_order", (MONITORING,))


_REQUIRE_DRAW: dict[str, bool] = {}
_PLAN_JSON = operator.itemgetter("plan_json")   # (a pass in C over a batch's cycles)
PLAIN = UnitCheck()


def requires_draw(plan_json: str) -> bool:
    """Whether a cycle's plan snapshot requires drawn units (parsed once per distinct text)."""
    value = _REQUIRE_DRAW.get(plan_json)
    if value is None:
        if len(_REQUIRE_DRAW) >= 1024:
            _REQUIRE_DRAW.clear()
        value = _REQUIRE_DRAW[plan_json] = bool(json.loads(plan_json).get("require_draw"))
    return value


class DrawMarks:
    """The drawn units of the open cycles a batch of records touches, for the ingest
    transaction: which record takes which place (by :func:`service.draw_rule.check_unit`),
    and the places taken, written back with :meth:`save`.

    One indexed query finds which of the batch's facilities have draws in their current
    cycle; only those facilities' drawn units are read. A batch with no such facility costs
    that one query.
    """

    def __init__(self, conn, items, cycles: dict[str, dict]):
        self._slots: dict[tuple[str, str], list[list]] = {}
        self._taken: list[tuple[int, int, int]] = []
        # plain: no record of the batch can meet a draw (no drawn unit among its open
        # cycles' and no plan of them requires one), so check() would answer PLAIN for all
        self.plain = not any(map(requires_draw, set(map(_PLAN_JSON, cycles.values()))))
        with_refs = list({it.facility_id for it in items
                          if it.unit_ref is not None and it.facility_id in cycles})
        if not with_refs:
            return
        drawn = {(fid, cyc) for fid, cyc in where_in(
            conn, "SELECT DISTINCT facility_id, cycle FROM draws WHERE facility_id IN "
                  "({marks})", with_refs)}
        for fid in with_refs:
            cyc = cycles[fid]
            if (fid, cyc["cycle"]) not in drawn or cyc["status"] != MONITORING:
                continue
            for draw_id, order, ref, record_id in conn.execute(
                    "SELECT u.draw_id, u.draw_order, u.unit_ref, r.record_id FROM draw_units u "
                    "LEFT JOIN records r ON r.seq = u.record_seq WHERE u.facility_id = ? AND "
                    "u.cycle = ? ORDER BY u.draw_id, u.draw_order", (fid, cyc["cycle"])):
                self._slots.setdefault((fid, ref), []).append([draw_id, order, record_id])
        if self._slots:
            self.plain = False

    def check(self, item, cyc: dict) -> UnitCheck:
        """The rule's answer for one record of an open cycle (see :mod:`service.draw_rule`)."""
        if cyc["_state"].status != MONITORING:
            return PLAIN            # a post-decision record: kept, never evidence anyway
        slots = self._slots.get((item.facility_id, item.unit_ref)) if self._slots else None
        if slots is None and not requires_draw(cyc["plan_json"]):
            return PLAIN            # the common case: no draw involved
        return check_unit(requires_draw(cyc["plan_json"]), item.unit_ref,
                          [DrawSlot(*s) for s in slots or ()])

    def take(self, item, check, seq: int) -> None:
        """Record that ``item`` (stored as ``seq``) took the place ``check`` named."""
        for slot in self._slots[(item.facility_id, item.unit_ref)]:
            if slot[0] == check.draw_id and slot[1] == check.order:
                slot[2] = item.record_id
        self._taken.append((seq, check.draw_id, check.order))

    def save(self, conn) -> None:
        if self._taken:
            conn.executemany("UPDATE draw_units SET record_seq = ? WHERE draw_id = ? AND "
                             "draw_order = ?", self._taken)
