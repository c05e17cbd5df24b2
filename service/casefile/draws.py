"""The case file's section on how the re-checked units were chosen: the cycle's frames and
RFC 3797 draws, which drawn units were re-checked, the commands that recompute each draw, and
whether every evidence record came from a draw."""
from __future__ import annotations

from urllib.parse import quote

from ..sampling import frame_file_name, verify_command
from ..store import Store


def draws_section(store: Store, facility_id: str, cycle: int, rows: list[dict],
                  snapshot: dict) -> dict:
    """``rows``: the cycle's records as :meth:`Store.records` gives them."""
    draws = []
    for listed in reversed(store.draws(facility_id, cycle)):        # oldest first
        d = store.draw(listed["draw_id"])
        frame = store.frame(d["frame_id"])
        draws.append({
            "draw_id": d["draw_id"], "made_at": d["created_at"], "made_by": d["created_by"],
            "frame": {"frame_id": frame["frame_id"], "label": frame["label"],
                      "period_start": frame["period_start"], "period_end": frame["period_end"],
                      "size": frame["size"], "sha256": frame["sha256"],
                      "file": frame_file_name(frame["frame_id"])},
            "seed": d["seed"], "key": d["key"], "size": d["size"],
            "units": [{"order": u["draw_order"], "frame_position": u["frame_position"],
                       "unit_ref": u["unit_ref"], "record_id": u["record_id"]}
                      for u in d["units"]],
            "rechecked": sum(1 for u in d["units"] if u["record_id"] is not None),
            "commands": [
                f"curl -H 'Authorization: Bearer KEY' -o {frame_file_name(frame['frame_id'])} "
                f"URL/v1/facilities/{quote(facility_id, safe='')}/frames/"
                f"{frame['frame_id']}/canonical",
                f"sha256sum {frame_file_name(frame['frame_id'])}   # must print "
                f"{frame['sha256']}",
                verify_command(d)],
        })
    evidence = [r for r in rows if r["counted"] and not r["void"]]
    drawn = [r for r in evidence if r.get("draw_id") is not None]
    excluded = [r for r in rows if r.get("excluded") and not r["void"]]
    every = bool(evidence) and len(drawn) == len(evidence)
    if not evidence:
        statement = "The cycle has no evidence records."
    elif every:
        statement = f"Every evidence record ({len(evidence)}) re-checked a unit from a draw."
    else:
        statement = (f"{len(evidence) - len(drawn)} of {len(evidence)} evidence records did not "
                     "re-check a unit from a draw: for them the random selection the test "
                     "assumes is not shown by this service.")
    return {"require_draw": bool(snapshot.get("require_draw", False)),
            "draws": draws,
            "evidence_records": len(evidence), "evidence_from_draws": len(drawn),
            "all_evidence_drawn": every,
            "records_not_counted_for_lack_of_draw": len(excluded),
            "statement": statement}
