"""The canonical form and the hash chain of the trail, against hand-written bytes and hashlib.

Check values: the SHA-256 digest of "abc" is the worked example of FIPS 180-4 (NIST,
Secure Hash Standard, 2015; example in NIST's "Examples with intermediate values", SHA-256
one-block message). Canonical JSON bytes are written out by hand from the rule in the
README (sorted keys, no spaces, UTF-8, only '"', '\\' and control characters escaped).
"""
import hashlib
import json

import pytest
from hypothesis import given, settings, strategies as st

from service.trail_hash import (GENESIS, RECORD_FIELDS, canonical, chain, content_sha256,
                                entry_sha256, header_bytes, record_canonical,
                                record_content_sha256, sha256_hex)


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


def test_entry_hash_recomputed_from_the_documented_header():
    ch = content_sha256({"record_id": "r-1", "units": 2})
    assert ch == hashlib.sha256(b'{"record_id":"r-1","units":2}').hexdigest()
    header = ('{"at":"2026-12-01T08:00:00.000000Z","content_sha256":"' + ch +
              '","kind":"record","n":1,"prev_sha256":"' + "0" * 64 + '"}').encode()
    assert header_bytes(1, "record", "2026-12-01T08:00:00.000000Z", ch, GENESIS) == header
    assert entry_sha256(1, "record", "2026-12-01T08:00:00.000000Z", ch, GENESIS) == \
        hashlib.sha256(header).hexdigest()
    # the header is itself canonical JSON
    assert header == canonical({"n": 1, "kind": "record", "at": "2026-12-01T08:00:00.000000Z",
                                "content_sha256": ch, "prev_sha256": GENESIS})


def test_chain_links_each_entry_to_the_one_before():
    bodies = [("record", "t1", b'{"a":1}'), ("void", "t2", b'{"a":2}'),
              ("action", "t3", b'{"a":3}')]
    out = list(chain(GENESIS, bodies, 1))
    prev = GENESIS
    for (n, ch, eh), (kind, at, body) in zip(out, bodies):   # recomputed step by step
        assert ch == hashlib.sha256(body).hexdigest()
        assert eh == entry_sha256(n, kind, at, ch, prev)
        prev = eh
    assert [n for n, _, _ in out] == [1, 2, 3]
    # one changed byte in entry 2 changes entry 2's hash and every later one, not entry 1's
    changed = list(chain(GENESIS, [bodies[0], ("void", "t2", b'{"a":9}'), bodies[2]], 1))
    assert changed[0] == out[0]
    assert changed[1][2] != out[1][2] and changed[2][2] != out[2][2]
    # continuing a chain gives the same hashes as building it at once
    assert list(chain(out[0][2], bodies[1:], 2)) == out[1:]


texts = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12)
ints = st.integers(min_value=0, max_value=2 ** 53)


@settings(max_examples=300, deadline=None)
@given(st.fixed_dictionaries({
    "cycle": ints, "facility_id": texts, "inspector": st.none() | texts,
    "key_label": st.none() | texts, "nonconforming": ints, "note": st.none() | texts,
    "observed_at": texts, "observed_utc": st.none() | texts, "received_at": texts,
    "record_id": texts, "seq": ints, "unit_ref": st.none() | texts, "units": ints}))
def test_fast_record_form_equals_the_generic_canonical_form(rec):
    row = tuple(rec[name] for name in RECORD_FIELDS)
    assert record_canonical(*row) == canonical(rec)
    assert record_content_sha256(row) == content_sha256(rec)
    json.loads(record_canonical(*row))          # and it is JSON


def test_a_hand_edit_of_a_column_type_changes_the_record_hash():
    rec = dict(zip(RECORD_FIELDS, (1, "F-1", None, "tablet", 1, None, "2026-11-30T09:00:00Z",
                                   "2026-11-30T09:00:00.000000Z", "2026-11-30T09:00:01.000000Z",
                                   "r-1", 7, None, 5)))
    row = tuple(rec.values())
    base = record_content_sha256(row)
    for i, other in ((12, 5.0), (12, 5.5), (12, "5"), (5, 5), (2, b"x".decode())):
        edited = row[:i] + (other,) + row[i + 1:]
        assert record_content_sha256(edited) != base, (i, other)
