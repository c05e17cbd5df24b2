"""What a case file cites of the tamper-evident trail, and the check of a case file against
a database (``seqaudit casefile --check``)."""
from __future__ import annotations

from ..store import Store
from ..store import trail as store_trail
from ..trail_check import check_trail

HOW_TO_CHECK = ("seqaudit casefile --check FILE.json --db PATH confirms this case file against "
                "the database; README, 'Tamper-evident trail', says how to recompute the hashes")

# the fields of a record in the case file that are compared with the database's row
_COMPARED = ("record_id", "facility_id", "cycle", "observed_at", "received_at", "units",
             "nonconforming", "unit_ref", "inspector", "note", "void", "voided_at",
             "voided_by", "void_reason")


def trail_citation(store: Store, facility_id: str, cycle: int, rows: list[dict]) -> dict:
    """The chain head at the cycle's decision, and the entry of each of its records (and of
    each void among them), from one read snapshot."""
    conn = store._conn()
    numbers = sorted({r["trail_n"] for r in rows if r.get("trail_n") is not None})
    by_n = store_trail.entries_by_number(conn, numbers)
    voids = store_trail.cited_entries(conn, "void", [str(r["seq"]) for r in rows if r["void"]])
    decision = store_trail.decision_entry(conn, facility_id, cycle)
    n, digest = store_trail.head(conn)
    return {
        "decision_entry": decision,
        "record_entries": [{"seq": r["seq"], "record_id": r["record_id"], "n": r["trail_n"],
                            "entry_sha256": by_n.get(r["trail_n"], {}).get("entry_sha256")}
                           for r in rows],
        "void_entries": [{"seq": int(seq), "n": e[0], "entry_sha256": e[3]}
                         for seq, e in sorted(voids.items(), key=lambda x: x[1][0])],
        "head_when_made": {"n": n, "entry_sha256": digest},
        "how_to_check": HOW_TO_CHECK,
    }


def check_casefile(store: Store, casefile: dict) -> tuple[list[str], str]:
    """(problems, summary) of a case file (as JSON-decoded) against the database."""
    cited = casefile.get("trail")
    if not isinstance(cited, dict):
        return ["the case file cites no trail (it was made before the trail existed, or the "
                "'trail' section was removed)"], ""
    conn = store._conn()
    problems: list[str] = []
    report = check_trail(conn)
    if not report.ok:
        problems.append(f"the database's trail does not verify ({len(report.problems)} "
                        f"problem(s)); the first: {report.first['problem']}")
    fid = (casefile.get("facility") or {}).get("facility_id")
    number = casefile.get("cycle")
    decision = cited.get("decision_entry") or {}
    have = store_trail.entries_by_number(conn, [decision.get("n")]).get(decision.get("n"))
    if not have or have["entry_sha256"] != decision.get("entry_sha256") \
            or have["kind"] != "decision":
        problems.append(f"the decision entry {decision.get('n')} cited by the case file is not "
                        "in the database's trail with that hash")
    latest = store_trail.decision_entry(conn, fid, number) if fid is not None else None
    if latest and decision and latest["n"] != decision.get("n"):
        problems.append(f"the cycle's decision was revised after the case file was made "
                        f"(entry {latest['n']}, {latest['alert_kind']}); make a new case file")
    rows = {r["seq"]: r for r in store_trail.records_by_seq(
        conn, [e.get("seq") for e in cited.get("record_entries", [])])}
    listed = {r.get("seq"): r for r in casefile.get("records", [])}
    numbers = [e.get("n") for e in cited.get("record_entries", [])]
    entries = store_trail.entries_by_number(conn, numbers)
    for e in cited.get("record_entries", []):
        seq, row = e.get("seq"), rows.get(e.get("seq"))
        name = f"record seq {seq} ({e.get('record_id')!r})"
        db_entry = entries.get(e.get("n"))
        if row is None:
            problems.append(f"{name} is not in the database")
            continue
        if row["trail_n"] != e.get("n") or db_entry is None \
                or db_entry["entry_sha256"] != e.get("entry_sha256"):
            problems.append(f"{name}: the case file cites entry {e.get('n')} "
                            f"{e.get('entry_sha256')}, the database has entry {row['trail_n']} "
                            f"{(db_entry or {}).get('entry_sha256')}")
        shown = listed.get(seq)
        if shown is None:
            problems.append(f"{name} is cited but not listed among the case file's records")
            continue
        for key in _COMPARED:
            want = bool(row[key]) if key == "void" else row[key]
            if key in shown and shown[key] != want:
                problems.append(f"{name}: the case file says {key} = {shown[key]!r}, the "
                                f"database {want!r}")
    voids = store_trail.cited_entries(conn, "void", [str(v.get("seq")) for v in
                                                     cited.get("void_entries", [])])
    for v in cited.get("void_entries", []):
        db_entry = voids.get(str(v.get("seq")))
        if db_entry is None or db_entry[3] != v.get("entry_sha256"):
            problems.append(f"the void of record seq {v.get('seq')}: the case file cites entry "
                            f"{v.get('n')}, the database does not have it with that hash")
    summary = (f"case file of {fid} cycle {number} matches the database: decision entry "
               f"{decision.get('n')} ({decision.get('entry_sha256')}), "
               f"{len(cited.get('record_entries', []))} record(s) and "
               f"{len(cited.get('void_entries', []))} void(s) cited, trail of "
               f"{report.entries} entries verified (head {report.head_n} "
               f"{report.head_sha256})")
    return problems, summary
