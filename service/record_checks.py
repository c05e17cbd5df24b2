"""Records accepted but worth a second look: observed before their cycle opened, or long ago.

Such a record still counts as evidence (the agency may load older re-checks on purpose); the
answer to the post and the facility page say so, so that a mistyped date is caught. Pure
functions over the service's UTC text ('YYYY-MM-DDTHH:MM:SS.ffffffZ', which sorts like the
instant it names).
"""
from __future__ import annotations

from datetime import timedelta

#: A record observed more than this many days before it was received is marked as old.
OLD_AFTER_DAYS = 365

BEFORE_CYCLE = "before_cycle"
OLD = "old"
WORDS = {
    BEFORE_CYCLE: "accepted, but observed before its monitoring cycle opened: check the date "
                  "(older re-checks loaded on purpose still count as evidence)",
    OLD: f"accepted, but observed more than {OLD_AFTER_DAYS} days before it was received: "
         "check the date",
}


def old_limit(now_utc: str, days: int = OLD_AFTER_DAYS) -> str:
    """The UTC text ``days`` before ``now_utc``; records observed before it are old."""
    from .clock import format_time, parse_rfc3339
    return format_time(parse_rfc3339(now_utc) - timedelta(days=days))


def observation_note(observed_utc: str, cycle_opened_at: str, oldest: str) -> str | None:
    """``OLD``, ``BEFORE_CYCLE`` or None for one record (old wins: it says more)."""
    if observed_utc < oldest:
        return OLD
    if observed_utc < cycle_opened_at:
        return BEFORE_CYCLE
    return None


#: The same notes as short words for the record table of the facility page.
SHORT = {BEFORE_CYCLE: "observed before this cycle opened",
         OLD: f"observed over {OLD_AFTER_DAYS} days before it was received"}


def observation_notes(records: list[dict], cycle_opened_at: str) -> dict[int, str]:
    """seq -> short note for the records (``*Public`` dicts) that deserve one."""
    from .clock import normalize_utc_text
    out = {}
    for r in records:
        note = observation_note(normalize_utc_text(r["observed_at"]), cycle_opened_at,
                                old_limit(r["received_at"]))
        if note:
            out[r["seq"]] = SHORT[note]
    return out
