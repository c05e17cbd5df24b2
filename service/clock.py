"""Time as the service writes it: RFC 3339, UTC, microseconds."""
from __future__ import annotations

import re
from datetime import datetime, timezone

RFC3339 = re.compile(r"^\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d{1,9})?([Zz]|[+-]\d{2}:\d{2})$")


def format_time(moment: datetime) -> str:
    return moment.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def utc_now() -> str:
    return format_time(datetime.now(timezone.utc))


_Z_FORM = re.compile(r"^(\d{4}-\d{2}-\d{2})[Tt](\d{2}:\d{2}:\d{2})(?:\.(\d{1,6}))?[Zz]$")


def normalize_rfc3339(text: str) -> tuple[datetime, str]:
    """(instant, the same instant as UTC text) for an RFC 3339 date-time; ValueError if bad."""
    z = _Z_FORM.match(text) if isinstance(text, str) else None
    if z:  # already UTC: the text form needs no conversion (the common case from tablets)
        day, clock, frac = z.groups()
        moment = datetime.fromisoformat(f"{day}T{clock}.{(frac or '').ljust(6, '0')}+00:00")
        return moment, f"{day}T{clock}.{(frac or '').ljust(6, '0')}Z"
    moment = parse_rfc3339(text)
    utc = moment.astimezone(timezone.utc)
    return moment, utc.isoformat(timespec="microseconds").replace("+00:00", "Z")


def parse_rfc3339(text: str) -> datetime:
    """Parse an RFC 3339 date-time (offset required); ValueError with the reason otherwise."""
    if not isinstance(text, str) or not RFC3339.match(text):
        raise ValueError("must be an RFC 3339 date-time with offset, e.g. 2026-03-01T09:30:00Z")
    body = text[:-1] + "+00:00" if text[-1] in "Zz" else text
    if "t" in body:
        body = body.replace("t", "T")
    if "." in body:
        frac = re.search(r"\.(\d+)", body)
        if frac and len(frac.group(1)) > 6:  # Python keeps microseconds only
            body = body.replace(frac.group(0), "." + frac.group(1)[:6])
    try:
        return datetime.fromisoformat(body)
    except ValueError as exc:
        raise ValueError(f"is not a valid date-time: {exc}") from None
