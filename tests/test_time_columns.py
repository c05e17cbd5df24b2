"""Stored UTC times read a whole column at once (service/time_columns.py).

Outside references: Python's ``datetime`` (proleptic Gregorian calendar, exact integer
timedelta arithmetic) and numpy's own ISO 8601 parser (``datetime64[us]``). The
civil-date formula is H. Hinnant's ``days_from_civil`` ("chrono-Compatible Low-Level
Date Algorithms"); its worked values below are Unix times (common practice: 946684800 s
is 2000-01-01T00:00:00Z). Every comparison is exact (integers), so there is no tolerance.
"""
from datetime import date, datetime, timedelta, timezone

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service import time_columns
from service.clock import format_time
from service.time_columns import days_from_civil, micros, utc_micros

EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
US = timedelta(microseconds=1)


def stored(moment: datetime) -> str:
    """The store's form, with the year zero-padded (strftime leaves years < 1000 short)."""
    return f"{moment.year:04d}-{moment:%m-%dT%H:%M:%S.%f}Z"


def by_datetime(moment: datetime) -> int:
    return (moment - EPOCH) // US


def test_days_from_civil_worked_values():
    # Unix times / 86400 (common practice): 0 is 1970-01-01, 946684800 s is 2000-01-01,
    # 951868800 s is 2000-03-01 (2000 is a leap year: 31 + 29 days later), -86400 s is
    # 1969-12-31; 0001-01-01 is 719162 days before the epoch (date.toordinal of 1970-01-01
    # is 719163, and 0001-01-01 has ordinal 1).
    got = days_from_civil([1970, 2000, 2000, 1969, 1], [1, 1, 3, 12, 1], [1, 1, 1, 31, 1])
    assert got.tolist() == [0, 10957, 11017, -1, -719162]


def test_days_from_civil_equals_datetime_on_a_seeded_sample():
    rng = np.random.default_rng(20261202)
    ordinals = rng.integers(1, date(9999, 12, 31).toordinal() + 1, size=20_000)
    days = [date.fromordinal(int(k)) for k in ordinals]
    got = days_from_civil([d.year for d in days], [d.month for d in days],
                          [d.day for d in days])
    np.testing.assert_array_equal(got, ordinals - date(1970, 1, 1).toordinal())


@settings(max_examples=300, deadline=None)
@given(st.dates(min_value=date(1, 1, 1), max_value=date(9999, 12, 31)))
def test_days_from_civil_equals_datetime_over_the_whole_range(day):
    expected = day.toordinal() - date(1970, 1, 1).toordinal()
    assert days_from_civil([day.year], [day.month], [day.day]).tolist() == [expected]


MOMENTS = st.datetimes(min_value=datetime(1, 1, 1), max_value=datetime(9999, 12, 31, 23, 59,
                                                                         59, 999_999),
                       timezones=st.just(timezone.utc))


@settings(max_examples=200, deadline=None)
@given(st.lists(MOMENTS, min_size=1, max_size=40))
def test_a_column_equals_datetime_arithmetic(moments):
    texts = [stored(m) for m in moments]
    assert utc_micros(texts).tolist() == [by_datetime(m) for m in moments]


def test_the_stored_form_is_read_without_the_slow_path(monkeypatch):
    # a seeded column of service-written times (format_time) reads all at once, and equals
    # numpy's own parser of the same texts (without the Z) and datetime's arithmetic
    rng = np.random.default_rng(7)
    start = datetime(1990, 1, 1, tzinfo=timezone.utc)
    moments = [start + timedelta(microseconds=int(u))
               for u in rng.integers(0, 60 * 365 * 86400 * 10**6, size=5000)]
    texts = [format_time(m) for m in moments]

    def refuse(texts):
        raise AssertionError("the stored form went through the slow path")

    monkeypatch.setattr(time_columns, "_one_by_one", refuse)
    got = utc_micros(texts)
    numpy_parse = np.array([t[:-1] for t in texts], dtype="datetime64[us]").astype(np.int64)
    np.testing.assert_array_equal(got, numpy_parse)
    assert got.tolist() == [by_datetime(m) for m in moments]


@pytest.mark.parametrize("text", ["2024-02-29T12:00:00.000000Z", "2000-02-29T00:00:00.000000Z",
                                  "9999-12-31T23:59:59.999999Z", "0001-01-01T00:00:00.000000Z"])
def test_edges_of_the_calendar_take_the_fast_path(monkeypatch, text):
    monkeypatch.setattr(time_columns, "_one_by_one", None)     # any use would fail
    moment = datetime.fromisoformat(text.replace("Z", "+00:00"))
    assert utc_micros([text, text]).tolist() == [by_datetime(moment)] * 2


def test_other_rfc3339_forms_are_read_one_by_one():
    # other widths and offsets: still read, the whole column then one text at a time
    texts = ["2026-11-01T09:00:00Z", "2026-11-01T10:30:00+02:00", "2026-11-01T09:00:00.5Z",
             "2026-11-01T09:00:00.000000Z", "2026-11-01t09:00:00.1234567z"]
    want = [datetime(2026, 11, 1, 9, tzinfo=timezone.utc),
            datetime(2026, 11, 1, 8, 30, tzinfo=timezone.utc),
            datetime(2026, 11, 1, 9, 0, 0, 500_000, tzinfo=timezone.utc),
            datetime(2026, 11, 1, 9, tzinfo=timezone.utc),
            datetime(2026, 11, 1, 9, 0, 0, 123_456, tzinfo=timezone.utc)]   # to the microsecond
    assert utc_micros(texts).tolist() == [by_datetime(m) for m in want]


def test_widths_that_make_up_for_each_other_are_not_misread():
    # 26 + 28 characters: the joined buffer has the right length, the rows do not align
    texts = ["2026-11-01T09:00:00.00000Z", "2026-11-01T09:00:00.0000000Z"]
    assert utc_micros(texts).tolist() == [by_datetime(datetime(2026, 11, 1, 9,
                                                               tzinfo=timezone.utc))] * 2
    # a newline inside a text, lengths adding up to three stored times: refused, not read
    # as three times
    with pytest.raises(ValueError, match="RFC 3339"):
        utc_micros(["2026-11-01T09:00:00.000000Z\n2026-11-01T09:00:00.000000Z", "",
                    "2026-11-01T09:00:00.00000Z"])


@pytest.mark.parametrize("bad", [
    "2026-02-30T09:00:00.000000Z",      # no such day
    "2025-02-29T09:00:00.000000Z",      # not a leap year
    "1900-02-29T09:00:00.000000Z",      # divisible by 100, not by 400
    "2026-13-01T09:00:00.000000Z",      # month 13
    "2026-00-10T09:00:00.000000Z",      # month 0
    "2026-11-00T09:00:00.000000Z",      # day 0
    "2026-11-01T24:00:00.000000Z",      # hour 24
    "2026-11-01T09:60:00.000000Z",      # minute 60
    "0000-01-01T00:00:00.000000Z",      # year 0 is outside datetime's calendar
    "2026-11-01 09:00:00.000000Z",      # space for T, right width
    "2026-11-0１T09:00:00.000000Z",     # a non-ASCII digit
    "yesterday at nine o'clock, UTC!",
    "",
])
def test_invalid_times_are_refused_naming_the_text(bad):
    good = "2026-11-01T09:00:00.000000Z"
    with pytest.raises(ValueError) as err:
        utc_micros([good, bad, good])
    assert repr(bad) in str(err.value)


def test_empty_column_and_one_time():
    assert utc_micros([]).shape == (0,) and utc_micros([]).dtype == np.int64
    assert micros("1970-01-01T00:00:01.000001Z") == 1_000_001
    with pytest.raises(ValueError):
        micros(None)


def test_a_column_longer_than_the_kept_templates(monkeypatch):
    # beyond _KEEP_ROWS texts the repeated form is built for the call (nothing kept)
    monkeypatch.setattr(time_columns, "_KEEP_ROWS", 3)
    moments = [datetime(2026, 11, d, 9, tzinfo=timezone.utc) for d in range(1, 8)]
    before = time_columns._TILED
    assert utc_micros([stored(m) for m in moments]).tolist() == [by_datetime(m)
                                                                 for m in moments]
    assert time_columns._TILED is before
