"""Canonical JSON and the hash chain of the tamper-evident trail (pure, stdlib only).

Every entry of the trail has a number ``n`` (1, 2, 3, ...), a ``kind`` (``record``,
``void``, ``decision``, ``alert``, ``action``, ...), a time ``at`` (RFC 3339 UTC) and a
``content`` object. Two SHA-256 digests are kept with it, both as lowercase hex:

* ``content_sha256`` = SHA-256 of the canonical JSON of ``content``;
* ``entry_sha256`` = SHA-256 of the canonical JSON of the entry's header
  ``{"at": at, "content_sha256": ..., "kind": kind, "n": n, "prev_sha256": ...}``, where
  ``prev_sha256`` is the ``entry_sha256`` of entry ``n - 1`` (64 zeros for entry 1).

Canonical JSON (RFC 8259 text): object keys sorted by code point, no whitespace at all
(separators ``,`` and ``:``), strings written as UTF-8 with only ``"``, ``\\`` and control
characters escaped (``\\n``, ``\\r``, ``\\t``, ``\\b``, ``\\f``, other controls as lowercase
``\\u00XX``), integers in decimal, ``true``/``false``/``null``; numbers that are not integers
(only the LLR figures inside a decision's detail) in the shortest form that reads back as
the same IEEE double (Python's ``repr``). NaN and infinities are refused.

This is what ``json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
allow_nan=False).encode("utf-8")`` writes; :func:`canonical` is that call. The ingest path
builds the same bytes for a record with one format string (:func:`record_canonical`);
a test checks the two agree on generated records.
"""
from __future__ import annotations

import hashlib
import json
from json.encoder import encode_basestring as _esc   # the C encoder when available

GENESIS = "0" * 64

# The columns of a stored record that its trail entry covers, in the (sorted) order of the
# keys of its content. The mutable columns (counted, void, voided_*) are not among them: a
# void is an entry of its own, and ``counted`` follows from the records by replay.
RECORD_FIELDS = ("cycle", "facility_id", "inspector", "key_label", "nonconforming", "note",
                 "observed_at", "observed_utc", "received_at", "record_id", "seq", "unit_ref",
                 "units")
_RECORD_FORMAT = "{" + ",".join(f'"{name}":%s' for name in RECORD_FIELDS) + "}"
_HEADER_FORMAT = '{"at":%s,"content_sha256":"%s","kind":%s,"n":%d,"prev_sha256":"%s"}'
_sha256 = hashlib.sha256


def canonical(obj) -> bytes:
    """The canonical JSON bytes of ``obj`` (see the module docstring)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8")


def sha256_hex(data: bytes) -> str:
    return _sha256(data).hexdigest()


def content_sha256(content: dict) -> str:
    return _sha256(canonical(content)).hexdigest()


def header_bytes(n: int, kind: str, at: str, content_hash: str, prev: str) -> bytes:
    """The canonical JSON of an entry's header (what ``entry_sha256`` is the hash of)."""
    return (_HEADER_FORMAT % (_esc(at), content_hash, _esc(kind), n, prev)).encode("utf-8")


def entry_sha256(n: int, kind: str, at: str, content_hash: str, prev: str) -> str:
    return _sha256(header_bytes(n, kind, at, content_hash, prev)).hexdigest()


def _text(value) -> str:
    return "null" if value is None else _esc(value)


def record_canonical(cycle, facility_id, inspector, key_label, nonconforming, note,
                     observed_at, observed_utc, received_at, record_id, seq, unit_ref,
                     units) -> bytes:
    """:func:`canonical` of a record's content, built with one format string.

    The integers (cycle, nonconforming, seq, units) are written with ``str``, the texts
    (or None) JSON-escaped. A value of another type (a text in an integer column or the
    reverse, which only a hand edit makes) raises TypeError or gives other bytes than the
    original content; callers that read rows back use :func:`record_content_sha256`.
    """
    return (_RECORD_FORMAT % (
        cycle, _esc(facility_id), _text(inspector), _text(key_label), nonconforming,
        _text(note), _esc(observed_at), _text(observed_utc), _esc(received_at),
        _esc(record_id), seq, _text(unit_ref), units)).encode("utf-8")


def record_content_sha256(row: tuple) -> str:
    """content_sha256 of a record given as a tuple in RECORD_FIELDS order, whatever the
    types of its values (falls back to :func:`canonical` when the fast form does not apply)."""
    if all(type(row[i]) is int for i in (0, 4, 10, 12)):
        try:
            return _sha256(record_canonical(*row)).hexdigest()
        except TypeError:
            pass
    return content_sha256(dict(zip(RECORD_FIELDS, row)))


def chain(prev: str, entries, first_n: int):
    """Yield (n, content_sha256, entry_sha256) for ``entries`` of (kind, at, canonical content
    bytes) appended after an entry whose hash is ``prev`` and whose number is first_n - 1."""
    n = first_n
    for kind, at, body in entries:
        ch = _sha256(body).hexdigest()
        prev = _sha256((_HEADER_FORMAT % (_esc(at), ch, _esc(kind), n, prev)
                        ).encode("utf-8")).hexdigest()
        yield n, ch, prev
        n += 1
