"""Replay every cycle from its stored records and compare with the stored states.

The per-facility update folds :func:`service.monitor.apply_record` one record at a time;
for a whole database the same rule is evaluated on running counts with numpy (the first
record after which the LLR, computed from the counts, reaches a boundary or the cap), which
gives the same state — a test checks the two agree. All cycles are replayed in one numpy
pass (:mod:`.replay_groups`); only cycles closed by hand go one at a time.
"""
from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np

from .monitor import CLOSED, CycleState
from .replay_groups import replay_groups
from .stats import MONITORING, SprtPlan
from .stats.sprt import BOUNDARY_TOL, CLEARED, FLAGGED
from .store import Store, plan_from_snapshot


def replay_counts(plan: SprtPlan, seq: np.ndarray, units: np.ndarray, bad: np.ndarray,
                  stop_seq: int | None = None) -> tuple[CycleState, np.ndarray]:
    """Vectorised replay of one cycle's live records (in receipt order)."""
    seq = np.asarray(seq, dtype=np.int64)
    if stop_seq is not None:
        keep = seq <= stop_seq
    else:
        keep = np.ones(seq.size, dtype=bool)
    n = np.cumsum(np.where(keep, units, 0))
    d = np.cumsum(np.where(keep, bad, 0))
    llr = d * (plan.g1 + plan.g2) - n * plan.g2
    up = llr >= plan.upper_llr - BOUNDARY_TOL
    down = llr <= plan.lower_llr + BOUNDARY_TOL
    cap = (n >= plan.max_units) if plan.max_units is not None else np.zeros(n.size, dtype=bool)
    stop = (up | down | cap) & keep
    counted = keep.copy()
    if not stop.any():
        return CycleState(status=MONITORING, units=int(n[-1]) if n.size else 0,
                          nonconforming=int(d[-1]) if d.size else 0), counted
    i = int(np.argmax(stop))
    counted[i + 1:] = False
    if up[i]:
        status = FLAGGED
    elif down[i]:
        status = CLEARED
    else:
        status = FLAGGED if llr[i] >= plan.cut_llr - BOUNDARY_TOL else CLEARED
    return CycleState(status=status, units=int(n[i]), nonconforming=int(d[i]),
                      decided_seq=int(seq[i]), decided_after_units=int(n[i]),
                      at_cap=bool(cap[i] and not up[i] and not down[i])), counted


@dataclass(frozen=True)
class VerifyReport:
    cycles: int
    records: int
    mismatches: list[dict]

    @property
    def ok(self) -> bool:
        return not self.mismatches


_FAC_BITS, _CYC_BITS, _N_BITS = 20, 8, 17
# The group key verify_database sorts on: (facility rowid << _GROUP_BITS) | cycle.
_GROUP_BITS = 32


def _load(conn) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(group key, units, nonconforming, counted) of every live record, in receipt order.

    The group key is (facility rowid << 32 | cycle). Python's sqlite3 spends most of a scan
    building row tuples, so when the numbers fit (cycle below 256, units below 2**17,
    facility rowid below 2**20) each row comes back as one packed 63-bit integer;
    otherwise as five plain columns.
    """
    top = conn.execute("SELECT COALESCE(MAX(units), 0), COALESCE(MAX(cycle), 0), "
                       "COALESCE(MAX(nonconforming), 0) FROM records").fetchone()
    top_fac = conn.execute("SELECT COALESCE(MAX(rowid), 0) FROM facilities").fetchone()[0]
    if top[1] >= 2 ** _GROUP_BITS or top_fac >= 2 ** (63 - _GROUP_BITS):
        raise ValueError(f"cycle numbers up to {top[1]} and {top_fac} facility rows do not "
                         "fit the replay's 63-bit group key")
    join = ("FROM records r JOIN facilities f ON f.facility_id = r.facility_id "
            "WHERE r.void = 0 AND r.excluded IS NULL ORDER BY r.seq")
    if max(top[0], top[2]) < 2 ** _N_BITS and top[1] < 2 ** _CYC_BITS \
            and top_fac < 2 ** _FAC_BITS:
        shift_g = 2 * _N_BITS + 1
        packed = np.array(conn.execute(
            f"SELECT (((f.rowid << {_CYC_BITS}) | r.cycle) << {shift_g}) | (r.units << "
            f"{_N_BITS + 1}) | (r.nonconforming << 1) | r.counted {join}").fetchall(),
            dtype=np.int64).reshape(-1)
        mask = (1 << _N_BITS) - 1
        small = packed >> shift_g
        group = ((small >> _CYC_BITS) << _GROUP_BITS) | (small & ((1 << _CYC_BITS) - 1))
        return (group, (packed >> (_N_BITS + 1)) & mask, (packed >> 1) & mask, packed & 1)
    rows = np.array(conn.execute(
        f"SELECT (f.rowid << {_GROUP_BITS}) | r.cycle, r.units, r.nonconforming, r.counted "
        f"{join}").fetchall(), dtype=np.int64).reshape(-1, 4)
    return rows[:, 0], rows[:, 1], rows[:, 2], rows[:, 3]


def verify_database(store: Store) -> VerifyReport:
    """Replay every cycle of the database and list any whose stored state differs."""
    cycles = {(c["facility_id"], c["cycle"]): c for c in store.read("SELECT * FROM cycles_planned")}
    conn = store._conn()
    names = dict(conn.execute("SELECT rowid, facility_id FROM facilities").fetchall())
    group, units, bad, counted = _load(conn)
    order = np.argsort(group, kind="stable")         # stable: receipt order within a cycle
    group, units, bad, counted = group[order], units[order], bad[order], counted[order]
    bounds = np.flatnonzero(np.r_[True, group[1:] != group[:-1], True]) if group.size \
        else np.array([0])
    mismatches: list[dict] = []
    seen = set()
    plans: dict[str, SprtPlan] = {}
    cyc_mask = (1 << _GROUP_BITS) - 1
    together = []        # (start, end, cycle row, plan) of cycles replayed all at once
    for a, b, g in zip(bounds[:-1].tolist(), bounds[1:].tolist(),
                       group[bounds[:-1]].tolist() if group.size else []):
        key = (names.get(g >> _GROUP_BITS), g & cyc_mask)
        seen.add(key)
        cyc = cycles.get(key)
        if cyc is None:
            mismatches.append({"facility_id": key[0], "cycle": key[1],
                               "problem": "records of a cycle that does not exist"})
            continue
        plan = plans.get(cyc["plan_json"])
        if plan is None:
            plan = plans[cyc["plan_json"]] = plan_from_snapshot(json.loads(cyc["plan_json"]))
        if cyc["closed_seq"] is None:
            together.append((a, b, cyc, plan))
            continue
        # closed by hand: receipt numbers matter (rare), one cycle at a time
        seq = np.array([r[0] for r in conn.execute(
            "SELECT seq FROM records WHERE facility_id = ? AND cycle = ? AND void = 0 "
            "AND excluded IS NULL ORDER BY seq", key)], dtype=np.int64)
        state, replayed = replay_counts(plan, seq, units[a:b], bad[a:b], cyc["closed_seq"])
        _compare(cyc, state, replayed, counted[a:b].astype(bool), mismatches)
    _compare_together(together, units, bad, counted, mismatches)
    for key, cyc in cycles.items():
        if key not in seen:
            _compare(cyc, CycleState(), np.zeros(0, dtype=bool), np.zeros(0, dtype=bool),
                     mismatches)
    return VerifyReport(cycles=len(cycles), records=int(group.size), mismatches=mismatches)


def _compare_together(together: list, units, bad, counted, out: list) -> None:
    """Replay the cycles in ``together`` in one numpy pass (:mod:`.replay_groups`) and
    compare each with its stored state."""
    if not together:
        return
    starts = np.array([a for a, _, _, _ in together], dtype=np.int64)
    sizes = np.array([b - a for a, b, _, _ in together], dtype=np.int64)
    # the records of these cycles: each start repeated over its run, plus 0, 1, 2, ...
    offsets = np.arange(int(sizes.sum())) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    index = np.repeat(starts, sizes) + offsets
    bounds = np.r_[0, np.cumsum(sizes)]
    plans = [p for _, _, _, p in together]
    res = replay_groups(
        bounds, units[index], bad[index],
        g12=np.array([p.g1 + p.g2 for p in plans]), g2=np.array([p.g2 for p in plans]),
        upper=np.array([p.upper_llr for p in plans]),
        lower=np.array([p.lower_llr for p in plans]),
        cap=np.array([p.max_units if p.max_units is not None else np.iinfo(np.int64).max
                      for p in plans], dtype=np.int64),
        cut=np.array([p.cut_llr for p in plans]))
    differs = np.add.reduceat((res.counted != counted[index].astype(bool)).astype(np.int64),
                              bounds[:-1]) > 0
    after = res.decided_after_units.tolist()
    for k, (cyc, status, n, d, diff) in enumerate(zip(
            (c for _, _, c, _ in together), res.status.tolist(), res.units.tolist(),
            res.nonconforming.tolist(), differs.tolist())):
        _check(cyc, (status, n, d, after[k] if after[k] >= 0 else None), diff, out)


_FIELDS = ("status", "units", "nonconforming", "decided_after_units")


def _compare(cyc: dict, state: CycleState, counted, stored_counted, out: list) -> None:
    status = state.status
    if status == MONITORING and cyc["closed_seq"] is not None:
        status = CLOSED
    _check(cyc, (status, state.units, state.nonconforming, state.decided_after_units),
           not np.array_equal(counted, stored_counted), out)


def _check(cyc: dict, want: tuple, counted_differ: bool, out: list) -> None:
    """Add a mismatch to ``out`` if the replayed ``want`` (the _FIELDS) or the evidence
    flags differ from the stored cycle."""
    if want[0] == MONITORING and cyc["status"] == CLOSED:
        # closed as undecided after a void while a later cycle was open
        want = (CLOSED, *want[1:])
    have = tuple(cyc[f] for f in _FIELDS)
    if want != have or counted_differ:
        out.append({"facility_id": cyc["facility_id"], "cycle": cyc["cycle"],
                    "stored": dict(zip(_FIELDS, have)), "replayed": dict(zip(_FIELDS, want))})
