"""Frames, draws and assignments: the application functions shared by the API, the CLI, the
dashboard and the demo. They validate, call the store and shape what callers see; the draw
itself is :mod:`service.selection` (RFC 3797)."""
from __future__ import annotations

import shlex
from itertools import groupby

from .errors import Invalid, NotFound
from .selection import CanonicalFrame, SelectionInputError, canonical_frame, draw

Actor = tuple[str, str]


def frame_file_name(frame_id: int) -> str:
    return f"frame-{frame_id}.txt"


def verify_command(draw_row: dict) -> str:
    """The offline command that recomputes a draw from the frame's canonical file."""
    return (f"seqaudit draw verify --frame {frame_file_name(draw_row['frame_id'])} "
            f"--seed {shlex.quote(draw_row['seed'])} --size {draw_row['size']}")


def frame_public(row: dict) -> dict:
    return {k: row[k] for k in ("frame_id", "facility_id", "label", "period_start",
                                "period_end", "size", "sha256", "duplicates", "created_at",
                                "created_by")}


def draw_public(row: dict) -> dict:
    out = {k: row[k] for k in ("draw_id", "facility_id", "cycle", "frame_id", "frame_label",
                               "frame_sha256", "frame_size", "size", "seed", "key",
                               "created_at", "created_by")}
    units = row.get("units")
    if units is not None:
        out["units"] = [{"order": u["draw_order"], "frame_position": u["frame_position"],
                         "unit_ref": u["unit_ref"], "record_id": u["record_id"]} for u in units]
        out["rechecked"] = sum(1 for u in units if u["record_id"] is not None)
    else:
        out["rechecked"] = row["rechecked"]
    out["verify_command"] = verify_command(row)
    return out


def _invalid(exc: SelectionInputError, field: str | None = None) -> Invalid:
    return Invalid(str(exc), field=field or exc.field)


class Sampling:
    """Frames, draws and assignments over a :class:`service.operations.Monitor`'s store."""

    def __init__(self, monitor):
        self.m = monitor

    # -- frames ------------------------------------------------------------------
    def register_frame(self, facility_id: str, label: str, period_start: str, period_end: str,
                       frame: CanonicalFrame, actor: Actor) -> dict:
        store = self.m.store
        frame_id = store.add_frame(facility_id, label, period_start, period_end, frame,
                                   self.m.clock(), actor)
        return frame_public(store.frame(frame_id))

    def frame_from_units(self, units: list[str]) -> CanonicalFrame:
        try:
            return canonical_frame(units)
        except SelectionInputError as exc:
            field = "units" if exc.index is None else f"units.{exc.index}"
            raise _invalid(exc, field) from None

    def frames(self, facility_id: str) -> dict:
        self.m.store.facility(facility_id)          # 404 for an unknown facility
        return {"facility_id": facility_id,
                "items": [frame_public(r) for r in self.m.store.frames(facility_id)]}

    def frame(self, facility_id: str, frame_id: int, with_text: bool = False) -> dict:
        row = self.m.store.frame(frame_id, with_text)
        if row["facility_id"] != facility_id:
            raise NotFound(f"facility {facility_id!r} has no frame {frame_id}")
        return row

    # -- draws -------------------------------------------------------------------
    def make_draw(self, facility_id: str, frame_id: int, size: int, seed: str,
                  actor: Actor) -> dict:
        """Draw ``size`` units of a frame of this facility with a public seed (RFC 3797).
        Every check happens before anything is written."""
        store = self.m.store
        store.facility(facility_id)                 # 404 for an unknown facility
        try:
            row = store.frame(frame_id, with_text=True)
        except NotFound:
            raise Invalid(f"no frame {frame_id}", field="frame_id") from None
        if row["facility_id"] != facility_id:
            raise Invalid(f"frame {frame_id} is a frame of another facility, not of "
                          f"{facility_id!r}", field="frame_id")
        if size > row["size"]:
            raise Invalid(f"size {size} is larger than frame {frame_id} ({row['size']} units)",
                          field="size")
        frame = canonical_frame(row["canonical"].split("\n")[:-1])
        if frame.sha256 != row["sha256"]:           # the stored frame is not what was hashed
            raise RuntimeError(f"frame {frame_id}: stored text does not match its SHA-256")
        try:
            result = draw(frame, seed, size)
        except SelectionInputError as exc:
            raise _invalid(exc) from None
        draw_id = store.add_draw(facility_id, frame_id, seed, result, frame.sha256,
                                 self.m.clock(), actor)
        return draw_public(store.draw(draw_id))

    def draws(self, facility_id: str, cycle: int | None = None) -> dict:
        self.m.store.facility(facility_id)
        return {"facility_id": facility_id,
                "items": [draw_public(r) for r in self.m.store.draws(facility_id, cycle)]}

    def draw(self, facility_id: str, draw_id: int) -> dict:
        row = self.m.store.draw(draw_id)
        if row["facility_id"] != facility_id:
            raise NotFound(f"facility {facility_id!r} has no draw {draw_id}")
        return draw_public(row)

    # -- assignments ---------------------------------------------------------------
    def assignments(self) -> dict:
        """Per facility with an open cycle, the drawn units not yet re-checked, in draw
        order, and nothing else about the facility."""
        rows = self.m.store.assignments()
        return {"items": [{"facility_id": fid,
                           "units": [{"draw_id": r["draw_id"], "order": r["draw_order"],
                                      "unit_ref": r["unit_ref"]} for r in group]}
                          for fid, group in groupby(rows, key=lambda r: r["facility_id"])]}
