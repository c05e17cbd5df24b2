"""Stored UTC times, a whole column at once: microseconds since 1970-01-01T00:00:00Z.

The store writes every instant as UTC text of one width, ``YYYY-MM-DDTHH:MM:SS.ffffffZ``
(27 characters, :func:`service.clock.format_time`). A column of them is joined into one
ASCII buffer, checked character by character against that form and read as two-digit
groups; each (year, month) then finds its first day in a table built once by the
civil-calendar formula (:func:`days_from_civil`). No Python work is done per text. Any
text not in that form (another width, an offset other than ``Z``, a date that is not on
the calendar) sends the whole column through :func:`service.clock.parse_rfc3339` one text
at a time: valid RFC 3339 times are still read, anything else raises ``ValueError``.
"""
from __future__ import annotations

from datetime import datetime, timedelta, timezone

import numpy as np

from .clock import parse_rfc3339

WIDTH = 27
US_PER_DAY = 86_400_000_000
_FORM = "0000-00-00T00:00:00.000000Z\n"        # each text and the newline that joins them
_ROW = len(_FORM)
_LOW = np.frombuffer(_FORM.encode("ascii"), np.uint8)
# how far above _LOW each character may be: 9 for a digit, 0 for a separator; the tens of
# month, day, hour, minute and second are limited further (1, 3, 2, 5, 5)
_SPAN = np.array([9 if ch == "0" else 0 for ch in _FORM], np.uint8)
_SPAN[[5, 8, 11, 14, 17]] = (1, 3, 2, 5, 5)
# the ten two-digit groups of the form: YY YY - MM - DD T hh : mm : ss . ff ff ff
_TENS = [0, 2, 5, 8, 11, 14, 17, 20, 22, 24]
_UNITS = [k + 1 for k in _TENS]
_MONTHS = 32            # year x 32 + month indexes the month tables
_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
_US = timedelta(microseconds=1)


def days_from_civil(y, m, d):
    """Days from 1970-01-01 to the proleptic Gregorian date (y, m, d), vectorised.

    Parameters
    ----------
    y, m, d : array_like of int
        Year, month (1-12) and day of the month; not checked here.

    Returns
    -------
    numpy.ndarray of int64
        Negative before 1970-01-01.

    Notes
    -----
    Howard Hinnant, "chrono-Compatible Low-Level Date Algorithms" (2013), section
    ``days_from_civil``: years counted from March (so a leap day ends its year), 400-year
    eras of 146097 days, the day of the year from March 1 by (153 m' + 2) / 5 with
    m' = 0 for March, and 719468 days from 0000-03-01 to 1970-01-01. Floor division
    stands for the paper's era rounding toward minus infinity.
    """
    m = np.asarray(m, np.int64)
    y = np.asarray(y, np.int64) - (m <= 2)
    era = y // 400
    yoe = y - era * 400                                                   # [0, 399]
    doy = (153 * ((m + 9) % 12) + 2) // 5 + np.asarray(d, np.int64) - 1   # [0, 365]
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy                         # [0, 146096]
    return era * 146097 + doe - 719468


def _month_tables() -> tuple[np.ndarray, np.ndarray]:
    """For every year x 32 + month: days from 1970-01-01 to its first day, and its
    number of days (0 where there is no such month: month 0 or above 12, year 0)."""
    ym = np.arange(10_000 * _MONTHS)
    y, m = ym // _MONTHS, ym % _MONTHS
    real = (y >= 1) & (m >= 1) & (m <= 12)
    first = np.where(real, days_from_civil(y, np.clip(m, 1, 12), 1), 0)
    nxt = days_from_civil(y + (m == 12), np.clip(m, 1, 12) % 12 + 1, 1)
    length = np.where(real, nxt - first, 0)
    return first.astype(np.int32), length.astype(np.int8)


_TABLES: tuple | None = None
_TILED: tuple = (0, _LOW, _SPAN)
_KEEP_ROWS = 200_000            # at most 2 x 28 x 200,000 bytes kept


def micros(text: str) -> int:
    """Microseconds since 1970-01-01T00:00:00Z of one RFC 3339 time (ValueError if bad)."""
    try:
        moment = parse_rfc3339(text)
    except ValueError as exc:
        raise ValueError(f"time {text!r} {exc}") from None
    return (moment - _EPOCH) // _US


def utc_micros(texts) -> np.ndarray:
    """Microseconds since 1970-01-01T00:00:00Z of each stored UTC time (int64).

    Parameters
    ----------
    texts : list of str
        Times as the store writes them, ``YYYY-MM-DDTHH:MM:SS.ffffffZ``; other RFC 3339
        forms are read one at a time (slower).

    Returns
    -------
    numpy.ndarray of int64

    Raises
    ------
    ValueError
        A text that is not an RFC 3339 date-time with an offset, or not a calendar date.
    """
    global _TABLES
    size = len(texts)
    if size == 0:
        return np.zeros(0, np.int64)
    try:
        raw = "\n".join([*texts, ""]).encode("ascii")
    except (TypeError, UnicodeEncodeError):
        return _one_by_one(texts)
    if len(raw) != _ROW * size:
        return _one_by_one(texts)
    low, span = _templates(size)
    # each character less its lowest value: the digits' values, 0 for a right separator
    value = np.subtract(np.frombuffer(raw, np.uint8), low)
    # every character within its range: with a newline in each row's last place and none
    # elsewhere, every text is exactly WIDTH characters of the stored form
    if not (value <= span).all():
        return _one_by_one(texts)
    # the two-digit groups (each 0-99: uint8), then the fields, one row each; no BLAS
    # call (a matrix product here would wake its threads, costlier than the product)
    rows = value.reshape(size, _ROW)
    group = (rows[:, _TENS] * np.uint8(10) + rows[:, _UNITS]).T.astype(np.int64)
    ym = group[0] * (100 * _MONTHS) + group[1] * _MONTHS + group[2]
    day = group[3]
    second = group[4] * 3600 + group[5] * 60 + group[6]
    micro = group[7] * 10_000 + group[8] * 100 + group[9]
    if _TABLES is None:
        _TABLES = _month_tables()
    first, length = _TABLES
    # a real month (year 1-9999, month 1-12), a day it has, a second of a day (hour < 24)
    day -= 1
    if day.min() < 0 or (day >= length[ym]).any() or second.max() >= 86_400:
        return _one_by_one(texts)
    return (first[ym] + day) * US_PER_DAY + (second * 1_000_000 + micro)


def _templates(size: int) -> tuple[np.ndarray, np.ndarray]:
    """The form's lowest characters and spans repeated for ``size`` texts (kept for the
    largest column seen up to _KEEP_ROWS texts, so that a call only slices them)."""
    global _TILED
    rows, low, span = _TILED
    if size > _KEEP_ROWS:
        return np.tile(_LOW, size), np.tile(_SPAN, size)
    if rows < size:
        rows = min(max(size, 2 * rows), _KEEP_ROWS)
        low, span = np.tile(_LOW, rows), np.tile(_SPAN, rows)
        _TILED = (rows, low, span)
    return low[:_ROW * size], span[:_ROW * size]


def _one_by_one(texts) -> np.ndarray:
    return np.array([micros(t) for t in texts], dtype=np.int64)
