"""Verifiable random draws of the units to re-check, and the canonical form of a frame.

Pure functions (stdlib only): no I/O, clock or settings.

A *frame* is the list of units a facility passed in a period (free-text unit refs). Its
canonical form is the refs trimmed, deduplicated and sorted by Unicode code point, each
followed by one line feed, encoded as UTF-8; the frame's fingerprint is the SHA-256 of those
bytes. A *draw* selects units from the canonical order by the publicly verifiable method of
RFC 3797 (Eastlake, "Publicly Verifiable Nominations Committee (NomCom) Random Selection",
2004, sections 4-6), with a key string built from a public seed and the frame's SHA-256.

Key string (our canonical form, after RFC 3797 section 4)
---------------------------------------------------------
The seed is written as sources separated by ``/`` (e.g. three lottery results). Inside a
source, values are separated by blanks, commas, semicolons or periods, and each value is
letters and digits only. When every value of a source is a whole number, the values are sorted
into ascending numeric order and written without leading zeros (RFC 3797 section 4); otherwise
the values keep their order and are upper-cased. Each value is followed by ``.`` and each
source by ``/``. The frame's SHA-256 (64 lower-case hex digits) is then appended as one more
source, ``<hex>./``. So the seed ``9319 / 2 5 12 8 10 / 9 18 26 34 41 45`` gives
``9319./2.5.8.10.12./9.18.26.34.41.45./`` followed by the frame's hash, and a seed already
in key form gives itself back.

Selection (RFC 3797 section 4)
------------------------------
Selection ``i`` (0-based) takes the MD5 digest of the two-byte big-endian ``i``, the key
string (ASCII) and the two-byte big-endian ``i`` again, reads it as a 128-bit big-endian
number, and takes it modulo the number of units still in the pool; that (0-based) place in
the remaining pool, in canonical order, is the unit selected, and it leaves the pool.
"""
from __future__ import annotations

import hashlib
import re
import unicodedata
from dataclasses import dataclass
from typing import Iterable, Sequence

MAX_REF_CHARS = 128
MAX_FRAME_UNITS = 200_000
MAX_SELECTIONS = 65_536          # the index is written in two bytes (RFC 3797 section 4)
MAX_SEED_CHARS = 1000
_VALUE = re.compile(r"[A-Za-z0-9]+")
_SEPARATORS = re.compile(r"[\s.,;]+")
_REFUSED_CATEGORIES = {"Cc", "Cs", "Zl", "Zp"}   # controls, lone surrogates, line breaks


class SelectionInputError(ValueError):
    """Input a frame or a draw cannot use; ``field`` names it, ``index`` the 0-based item."""

    def __init__(self, field: str, message: str, index: int | None = None):
        super().__init__(message)
        self.field = field
        self.index = index


@dataclass(frozen=True)
class CanonicalFrame:
    """A frame in canonical form.

    Attributes
    ----------
    units : tuple of str
        distinct trimmed refs sorted by code point; position k (1-based) is ``units[k-1]``
    duplicates : tuple of str
        refs given more than once (after trimming), each named once, sorted
    text : str
        the canonical text: each ref followed by ``"\\n"``
    sha256 : str
        lower-case hex SHA-256 of ``text`` encoded as UTF-8
    """

    units: tuple[str, ...]
    duplicates: tuple[str, ...]
    text: str
    sha256: str

    @property
    def size(self) -> int:
        return len(self.units)


@dataclass(frozen=True)
class Draw:
    """An ordered selection from a frame.

    Attributes
    ----------
    key : str
        the RFC 3797 key string the selection hashed
    positions : tuple of int
        1-based positions in the frame's canonical order, in draw order
    units : tuple of str
        the unit refs at those positions, in draw order
    """

    key: str
    positions: tuple[int, ...]
    units: tuple[str, ...]


def check_ref(ref: object, index: int, field: str = "units") -> str:
    """One unit ref trimmed, or SelectionInputError naming ``index`` (0-based)."""
    if not isinstance(ref, str):
        raise SelectionInputError(field, f"unit ref at index {index} is not text", index)
    text = ref.strip()
    if not text:
        raise SelectionInputError(field, f"unit ref at index {index} is empty", index)
    if len(text) > MAX_REF_CHARS:
        raise SelectionInputError(field, f"unit ref at index {index} has {len(text)} "
                                         f"characters; at most {MAX_REF_CHARS}", index)
    for ch in text:
        if unicodedata.category(ch) in _REFUSED_CATEGORIES:
            raise SelectionInputError(field, f"unit ref at index {index} contains the control "
                                             f"character U+{ord(ch):04X}", index)
    return text


def canonical_frame(refs: Iterable[object], field: str = "units") -> CanonicalFrame:
    """Trim, check, deduplicate and sort unit refs; hash the canonical text.

    Raises SelectionInputError for an empty frame, a ref that is empty, longer than
    ``MAX_REF_CHARS`` or holds a control character (naming its 0-based index), or more than
    ``MAX_FRAME_UNITS`` refs.
    """
    seen: set[str] = set()
    dupes: set[str] = set()
    for i, ref in enumerate(refs):
        text = check_ref(ref, i, field)
        if text in seen:
            dupes.add(text)
        else:
            seen.add(text)
            if len(seen) > MAX_FRAME_UNITS:
                raise SelectionInputError(field, f"more than {MAX_FRAME_UNITS} distinct units")
    if not seen:
        raise SelectionInputError(field, "the frame has no units")
    units = tuple(sorted(seen))   # str ordering is by code point
    text = "".join(u + "\n" for u in units)
    return CanonicalFrame(units=units, duplicates=tuple(sorted(dupes)), text=text,
                          sha256=hashlib.sha256(text.encode("utf-8")).hexdigest())


def seed_key(seed: str, field: str = "seed") -> str:
    """The seed's part of the key string (see the module docstring)."""
    if not isinstance(seed, str) or not seed.strip():
        raise SelectionInputError(field, "the seed is empty")
    if len(seed) > MAX_SEED_CHARS:
        raise SelectionInputError(field, f"the seed has {len(seed)} characters; "
                                         f"at most {MAX_SEED_CHARS}")
    out = []
    for n, source in enumerate(seed.split("/")):
        values = [v for v in _SEPARATORS.split(source) if v]
        if not values:
            continue
        for v in values:
            if not _VALUE.fullmatch(v):
                raise SelectionInputError(
                    field, f"source {n + 1} of the seed has the value {v!r}: use letters and "
                           "digits, values separated by blanks, commas or periods, sources by '/'")
        if all(v.isascii() and v.isdigit() for v in values):
            values = [str(x) for x in sorted(int(v) for v in values)]
        else:
            values = [v.upper() for v in values]
        out.append("".join(v + "." for v in values) + "/")
    if not out:
        raise SelectionInputError(field, "the seed has no values")
    return "".join(out)


def key_string(seed: str, frame_sha256: str) -> str:
    """The full RFC 3797 key string: the seed's sources, then the frame's SHA-256."""
    if not re.fullmatch(r"[0-9a-f]{64}", frame_sha256 or ""):
        raise SelectionInputError("frame_sha256", "not a lower-case hex SHA-256")
    return seed_key(seed) + frame_sha256 + "./"


def selection_digest(key: str | bytes, i: int) -> bytes:
    """MD5 of the two-byte big-endian ``i``, the key and ``i`` again (RFC 3797 section 4)."""
    k = key.encode("ascii") if isinstance(key, str) else key
    prefix = i.to_bytes(2, "big")
    return hashlib.md5(prefix + k + prefix).digest()


def pick(key: str | bytes, pool: int, size: int) -> list[int]:
    """RFC 3797 selection of ``size`` of ``pool`` numbered items.

    Returns the 1-based numbers of the selected items, in selection order.

    Raises SelectionInputError (field ``size`` or ``pool``) when ``size`` is below 1, above
    ``pool`` or above 65,536, or ``pool`` is below 1.
    """
    if pool < 1:
        raise SelectionInputError("pool", f"the pool must hold at least 1 item, got {pool}")
    if size < 1:
        raise SelectionInputError("size", f"size must be at least 1, got {size}")
    if size > pool:
        raise SelectionInputError("size", f"size {size} is larger than the pool ({pool})")
    if size > MAX_SELECTIONS:
        raise SelectionInputError("size", f"size {size} is above {MAX_SELECTIONS}")
    remaining = list(range(1, pool + 1))
    chosen = []
    for i in range(size):
        value = int.from_bytes(selection_digest(key, i), "big")
        chosen.append(remaining.pop(value % len(remaining)))
    return chosen


def draw(frame: CanonicalFrame | Sequence[str], seed: str, size: int) -> Draw:
    """Draw ``size`` units from a frame with a public seed (RFC 3797)."""
    if not isinstance(frame, CanonicalFrame):
        frame = canonical_frame(frame)
    key = key_string(seed, frame.sha256)
    if size > frame.size:
        raise SelectionInputError("size", f"size {size} is larger than the frame "
                                          f"({frame.size} units)")
    positions = pick(key, frame.size, size)
    return Draw(key=key, positions=tuple(positions),
                units=tuple(frame.units[p - 1] for p in positions))


def parse_frame_text(text: str) -> tuple[list[str], list[int]]:
    """Unit refs of an uploaded frame file and the line each came from (1-based).

    A file whose first line, read as CSV, has a column named ``unit_ref`` is read as CSV and
    that column is taken; any other file holds one unit ref per line. Blank lines are skipped.
    """
    import csv
    import io

    text = text.removeprefix("\ufeff")
    lines = text.split("\n", 1)
    try:
        first = next(csv.reader([lines[0].removesuffix("\r")]), [])
    except csv.Error:
        first = []
    if "unit_ref" in [c.strip() for c in first]:
        reader = csv.DictReader(io.StringIO(text, newline=""))
        refs, where = [], []
        try:
            reader.fieldnames = [c.strip() for c in reader.fieldnames or []]
            for row in reader:
                value = row.get("unit_ref") or ""
                if value.strip():
                    refs.append(value)
                    where.append(reader.line_num)
        except csv.Error as exc:
            raise SelectionInputError("file", f"not readable as CSV near line "
                                              f"{reader.line_num}: {exc}") from None
        return refs, where
    refs, where = [], []
    for n, line in enumerate(text.split("\n"), start=1):
        line = line.removesuffix("\r")
        if line.strip():
            refs.append(line)
            where.append(n)
    return refs, where


def frame_from_text(text: str, field: str = "file") -> CanonicalFrame:
    """The canonical frame of an uploaded file; errors name the file's line."""
    refs, where = parse_frame_text(text)
    try:
        return canonical_frame(refs, field)
    except SelectionInputError as exc:
        if exc.index is None:
            raise
        line = where[exc.index]
        message = str(exc).replace(f"at index {exc.index}", f"on line {line}")
        raise SelectionInputError(field, message, exc.index) from None
