"""Whether a record's unit was drawn, and whether it may count: a pure rule beside
:mod:`service.monitor` (no SQL, no clock).

Units are re-checked from RFC 3797 draws of the facility's open cycle. A record whose
``unit_ref`` is a unit of such a draw not yet re-checked is *drawn*: it takes the first such
place (lowest draw, then order). A record for a drawn unit whose places are all re-checked
already is refused (a unit counts once), naming the first record. Under a plan with
``require_draw``, a record that is not drawn is kept and shown but is not evidence.
"""
from __future__ import annotations

from typing import NamedTuple

NOT_DRAWN = "not_drawn"
EXCLUSION_TEXT = {
    NOT_DRAWN: "not evidence: the plan requires drawn units, and this record's unit_ref is not "
               "a unit still to re-check in a draw of the open cycle",
}


class DrawSlot(NamedTuple):
    """One place in a draw of the open cycle that holds a given unit ref."""

    draw_id: int
    order: int
    record_id: str | None      # the record that re-checked it, None while pending


class UnitCheck(NamedTuple):
    """What becomes of a record's unit."""

    draw_id: int | None = None      # drawn: the draw and the place taken
    order: int | None = None
    excluded: str | None = None     # kept but not evidence (a key of EXCLUSION_TEXT)
    conflict: str | None = None     # refused: the message names the first record


def check_unit(require_draw: bool, unit_ref: str | None, slots: list[DrawSlot]) -> UnitCheck:
    """The rule for one record, given the places of its ``unit_ref`` in the draws of its
    facility's open cycle (in draw order)."""
    for slot in slots:
        if slot.record_id is None:
            return UnitCheck(draw_id=slot.draw_id, order=slot.order)
    if slots:
        first = slots[0]
        return UnitCheck(conflict=f"unit {unit_ref!r} (draw {first.draw_id}, place "
                                  f"{first.order}) was already re-checked by record "
                                  f"{first.record_id!r}; a drawn unit counts once")
    if require_draw:
        return UnitCheck(excluded=NOT_DRAWN)
    return UnitCheck()


def exclusion_text(code: str | None) -> str | None:
    return None if code is None else EXCLUSION_TEXT.get(code, code)
