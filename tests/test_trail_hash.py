"""The canonical form and the hash chain of the trail, against hand-written bytes and hashlib.

Check values: the SHA-256 digest of "abc" is the one-block worked example of FIPS 180-4
(NIST, Secure Hash Standard, 2015; "Examples with intermediate values", SHA-256). Canonical
JSON bytes are written out by hand from the rule in the README (sorted keys, no spaces,
UTF-8, only '"', '\\' and control characters escaped).
"""
import hashlib
import json

import pytest
from hypothesis import given, settings, strategies as st

from service.trail_hash import (GENESIS, RECORD_FIELDS, canonical, entry_bytes, entry_sha256,
                                records_content, sha256_hex)

AT = "2026-12-01T08:00:00.000000Z"


def test_sha256_is_the_standard_one():
    # FIPS 180-4 worked example: SHA-256("abc")
    assert sha256_hex(b"abc") == ("ba7816bf8f01cfea414140de5dae2223"
                                  "b00361a396177a9cb410ff61f20015ad")


def test_canonical_bytes_written_out_by_hand():
    obj = {"units": 3, "b": None, "a": [True, False, 1.5], "é": "Łódź \"1\"\n\x01",
           "nested": {"z": 1, "y": "x"}}
    want = ('{"a":[true,false,1.5],"b":null,"nested":{"y":"x","z":1},"units":3,'
            '"é":"Łódź \\"1\\"\\n\\u0001"}').encode("utf-8")
    assert canonical(obj) == want
    # non-ASCII is written as UTF-8 bytes, not escaped: 'é' is C3 A9, 'Ł' is C5 81
    assert b"\xc3\xa9" in want and b"\xc5\x81" in want


def test_canonical_refuses_nan_and_infinity():
    for bad in (float("nan"), float("inf"), -float("inf")):
        with pytest.raises(ValueError):
            canonical({"x": bad})


def test_entry_hash_recomputed_from_the_documented_form():
    content = canonical({"record_id": "r-1", "units": 2})
    assert content == b'{"record_id":"r-1","units":2}'
    entry = (b'{"at":"2026-12-01T08:00:00.000000Z","content":{"record_id":"r-1","units":2},'
             b'"kind":"record","n":1,"prev_sha256":"' + b"0" * 64 + b'"}')
    assert entry_bytes(1, "record", AT, content, GENESIS) == entry
    assert entry_sha256(1, "record", AT, content, GENESIS) == hashlib.sha256(entry).hexdigest()
    # the entry is itself the canonical JSON of the documented object
    assert entry == canonical({"n": 1, "kind": "record", "at": AT, "prev_sha256": GENESIS,
                               "content": {"units": 2, "record_id": "r-1"}})


def test_each_entry_hash_depends_on_every_earlier_entry():
    bodies = [("record", "t1", b'{"a":1}'), ("void", "t2", b'{"a":2}'), ("action", "t3", b'{}')]

    def run(items):
        prev, out = GENESIS, []
        for n, (kind, at, body) in enumerate(items, start=1):
            prev = entry_sha256(n, kind, at, body, prev)
            out.append(prev)
        return out

    out = run(bodies)
    assert len(set(out)) == 3
    changed = run([bodies[0], ("void", "t2", b'{"a":9}'), bodies[2]])
    assert changed[0] == out[0] and changed[1] != out[1] and changed[2] != out[2]
    assert run([("record", "t1", b'{"a":1}'), ("void", "t2x", b'{"a":2}'), bodies[2]])[2] \
        != out[2]


texts = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12)
ints = st.integers(min_value=0, max_value=2 ** 53)
records = st.fixed_dictionaries({
    "cycle": ints, "draw_id": st.none() | ints, "draw_order": st.none() | ints,
    "excluded": st.none() | texts, "facility_id": texts, "inspector": st.none() | texts,
    "key_label": st.none() | texts, "nonconforming": ints, "note": st.none() | texts,
    "observed_at": texts, "observed_utc": st.none() | texts, "received_at": texts,
    "record_id": texts, "seq": ints, "unit_ref": st.none() | texts, "units": ints})


@settings(max_examples=200, deadline=None)
@given(st.lists(records, min_size=1, max_size=5))
def test_records_content_is_the_documented_canonical_object(recs):
    rows = [tuple(rec[name] for name in RECORD_FIELDS) for rec in recs]
    want = canonical({"fields": list(RECORD_FIELDS),
                      "rows": [[rec[name] for name in RECORD_FIELDS] for rec in recs]})
    assert records_content(rows) == want
    # written out by hand for the first record: arrays in field order, no spaces
    first = json.dumps([recs[0][name] for name in RECORD_FIELDS], separators=(",", ":"),
                       ensure_ascii=False).encode("utf-8")
    assert want.startswith(b'{"fields":["cycle","draw_id","draw_order",') and first in want


def test_a_hand_edit_of_a_column_type_changes_the_records_content():
    row = (1, 4, 2, None, "F-1", None, "tablet", 1, None, "2026-11-30T09:00:00Z",
           "2026-11-30T09:00:00.000000Z", "2026-11-30T09:00:01.000000Z", "r-1", 7, None, 5)
    base = records_content([row])
    assert b'"rows":[[1,4,2,null,"F-1",null,"tablet",1,null,' in base
    for i, other in ((15, 5.0), (15, 5.5), (15, "5"), (8, 5), (4, b"F-1"), (4, 1.0),
                     (1, None), (3, "not drawn")):
        edited = row[:i] + (other,) + row[i + 1:]
        assert records_content([edited]) != base, (i, other)
        json.loads(records_content([edited]))


def test_records_content_writes_every_code_point_as_the_standard_encoder_does():
    # records_content goes through orjson; the canonical form is defined by the standard
    # library's encoder (json.dumps(..., ensure_ascii=False)). Brute force over every code
    # point except the surrogates (which UTF-8 cannot hold), in 64 rows of texts.
    points = [cp for cp in range(0x110000) if not 0xD800 <= cp <= 0xDFFF]
    step = len(points) // 64 + 1
    for start in range(0, len(points), step):
        chunk = "".join(map(chr, points[start:start + step]))
        row = (1, None, None, chunk, "F-1", chunk[:40], "k", 0, "\x00\x1f\x7f\u2028", chunk,
               None, "t", "r-1", 2 ** 64 - 1, None, 1)
        want = json.dumps({"fields": list(RECORD_FIELDS), "rows": [list(row)]},
                          sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                          allow_nan=False).encode("utf-8")
        assert records_content([row]) == want, start


def test_records_content_refused_by_orjson_still_canonical_or_unique():
    # integers past 64 bits and lone surrogates are refused by orjson: the standard encoder
    # (or the text no stored record has) takes over, as before
    big = (1, None, None, None, "F", None, "k", 0, None, "a", None, "t", "r", 2 ** 70, None, 1)
    assert records_content([big]) == canonical({"fields": list(RECORD_FIELDS),
                                                "rows": [list(big)]})
    odd = big[:4] + ("F\ud800",) + big[5:]
    # the lone surrogate written as its own three bytes (not UTF-8: text no record has)
    assert b'"F\xed\xa0\x80"' in records_content([odd])
