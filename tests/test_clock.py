"""RFC 3339 handling: the fast UTC path agrees with datetime arithmetic (hypothesis)."""
from datetime import datetime, timedelta, timezone

import pytest
from hypothesis import given, strategies as st

from service.clock import format_time, normalize_utc_text, parse_rfc3339


@given(moment=st.datetimes(min_value=datetime(1971, 1, 1), max_value=datetime(2200, 1, 1),
                           timezones=st.just(timezone.utc)),
       offset_min=st.integers(-14 * 60, 14 * 60), digits=st.integers(0, 9), lower=st.booleans())
def test_normalised_text_is_the_instant_in_utc(moment, offset_min, digits, lower):
    tz = timezone(timedelta(minutes=offset_min))
    local = moment.astimezone(tz)
    frac = f"{local.microsecond:06d}{'789'}"[:digits]
    text = local.strftime("%Y-%m-%dT%H:%M:%S") + (f".{frac}" if digits else "")
    text += ("z" if lower else "Z") if offset_min == 0 and digits % 2 else local.strftime("%z")[:3] \
        + ":" + local.strftime("%z")[3:]
    if lower:
        text = text.replace("T", "t")
    expect = format_time(parse_rfc3339(text))
    assert normalize_utc_text(text) == expect
    # sorts like the instant
    later = format_time(parse_rfc3339(text) + timedelta(microseconds=1))
    assert normalize_utc_text(text) < later


@pytest.mark.parametrize("text", ["2026-02-30T10:00:00Z", "2026-13-01T10:00:00Z",
                                  "2026-11-30T24:00:00Z", "2026-11-30T10:60:00Z",
                                  "2026-11-30T10:00:00", "2026-11-30 10:00:00Z", "yesterday"])
def test_invalid_times_are_refused(text):
    with pytest.raises(ValueError):
        normalize_utc_text(text)


@given(moment=st.datetimes(min_value=datetime(1, 1, 1), max_value=datetime(9999, 12, 31),
                           timezones=st.just(timezone.utc)), digits=st.integers(0, 9))
def test_utc_text_of_the_z_form_is_datetimes(moment, digits):
    # the form tablets send (Z, whole seconds or a fraction) takes the fast path; the
    # expected text comes from datetime's own formatting (fraction cut to microseconds)
    frac = f"{moment.microsecond:06d}789"[:digits]
    text = moment.strftime("%Y-%m-%dT%H:%M:%S").rjust(19, "0")   # (%Y: no zeros before 1000)
    text += (f".{frac}" if digits else "") + "Z"
    cut = moment.replace(microsecond=int(frac[:6].ljust(6, "0")) if digits else 0)
    assert normalize_utc_text(text) == f"{cut.year:04d}" + cut.strftime("-%m-%dT%H:%M:%S.%fZ")


def test_a_day_refused_once_is_refused_again():
    # the second call reads the cached answer for the day
    for _ in range(2):
        with pytest.raises(ValueError, match="not a calendar date"):
            normalize_utc_text("2027-02-29T10:00:00Z")
