"""seqaudit draw verify / draw pick: recompute a draw offline from public inputs."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from ..selection import SelectionInputError, draw, frame_from_text, pick


def verify(frame_file: str, seed: str, size: int, as_json: bool = False) -> int:
    """Print the ordered draw of ``size`` units from the frame in ``frame_file``.

    Raises OSError for an unreadable file and SelectionInputError for unusable input.
    """
    text = Path(frame_file).read_text(encoding="utf-8")
    frame = frame_from_text(text)
    result = draw(frame, seed, size)
    if as_json:
        json.dump({"frame_sha256": frame.sha256, "frame_size": frame.size,
                   "duplicates": list(frame.duplicates), "key": result.key,
                   "units": [{"order": i + 1, "position": p, "unit_ref": u}
                             for i, (p, u) in enumerate(zip(result.positions, result.units))]},
                  sys.stdout, indent=2, ensure_ascii=False)
        sys.stdout.write("\n")
        return 0
    print(f"frame: {frame.size} units, sha256 {frame.sha256}")
    if frame.duplicates:
        shown = ", ".join(frame.duplicates[:10])
        more = f" and {len(frame.duplicates) - 10} more" if len(frame.duplicates) > 10 else ""
        print(f"duplicates counted once: {len(frame.duplicates)} ({shown}{more})")
    print(f"key: {result.key}")
    print("order\tposition\tunit_ref")
    for i, (p, u) in enumerate(zip(result.positions, result.units), start=1):
        print(f"{i}\t{p}\t{u}")
    return 0


def bare_pick(key: str, pool: int, size: int) -> int:
    """Print the RFC 3797 selections (1-based numbers), one per line."""
    try:
        key.encode("ascii")
    except UnicodeEncodeError:
        raise SelectionInputError("key", "the key string must be ASCII") from None
    for n in pick(key, pool, size):
        print(n)
    return 0
