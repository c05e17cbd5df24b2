"""The per-facility update: a pure function (state, record) -> (state, decision).

A monitoring cycle accumulates units and nonconforming units from the records
in receipt order; its LLR is always recomputed from those counts with the
plan snapshot of the cycle. The first record after which the plan decides
freezes the cycle: later records are kept as post-decision records and never
change the decision. Replaying a cycle is a fold of :func:`apply_record`.
"""
from __future__ import annotations

from typing import NamedTuple

from .stats import CLEARED, FLAGGED, MONITORING, SprtPlan
from .stats.sprt import BOUNDARY_TOL

CLOSED = "closed"
STATUSES = (MONITORING, FLAGGED, CLEARED, CLOSED)
DECIDED = (FLAGGED, CLEARED)


class CycleState(NamedTuple):
    """What a cycle knows after its evidence so far.

    Immutable value types here are named tuples: a replay makes one per record, and a named
    tuple is built several times faster than a frozen dataclass.
    """

    status: str = MONITORING
    units: int = 0
    nonconforming: int = 0
    decided_seq: int | None = None            # receipt number of the deciding record
    decided_after_units: int | None = None
    decided_at: str | None = None             # receipt time of the deciding record
    at_cap: bool = False                      # decided by the cap's cut rule

    @property
    def is_open(self) -> bool:
        return self.status == MONITORING


class Evidence(NamedTuple):
    """The part of a record the test uses."""

    seq: int
    units: int
    nonconforming: int
    received_at: str


class Decision(NamedTuple):
    """A cycle became decided by this record."""

    status: str           # flagged or cleared
    at_cap: bool
    after_units: int


def apply_record(plan: SprtPlan, state: CycleState, rec: Evidence) -> tuple[CycleState, Decision | None, bool]:
    """Add one record to a cycle.

    Returns
    -------
    (state, decision, counted)
        ``counted`` is False for a record that arrives after the cycle stopped
        (decided or closed): it is kept but is not evidence.
    """
    if not state.is_open:
        return state, None, False
    units = state.units + rec.units
    bad = state.nonconforming + rec.nonconforming
    status = plan.decide(units, bad)
    if status == MONITORING:
        return CycleState(MONITORING, units, bad), None, True
    at_cap = (plan.max_units is not None and units >= plan.max_units
              and plan.llr(units, bad) < plan.upper_llr - 1e-9
              and plan.llr(units, bad) > plan.lower_llr + 1e-9)
    new = CycleState(status=status, units=units, nonconforming=bad, decided_seq=rec.seq,
                     decided_after_units=units, decided_at=rec.received_at, at_cap=at_cap)
    return new, Decision(status=status, at_cap=at_cap, after_units=units), True


def apply_run(plan: SprtPlan, state: CycleState, seqs: list[int], units: list[int],
              bad: list[int], received_at: str) -> tuple[CycleState, Decision | None, int]:
    """Add consecutive records of one cycle, all received at ``received_at``: the same as
    folding :func:`apply_record` over them, one Python step for the whole run when no
    prefix of it can reach a boundary or the cap.

    Returns
    -------
    (state, decision, counted)
        the first ``counted`` records are evidence; when ``decision`` is not None the
        last of them decided the cycle.

    Notes
    -----
    The LLR ``d (g1 + g2) - n g2`` grows with ``d`` and falls with ``n`` (g1, g2 > 0 as
    p1 > p0), and floating-point multiplication and subtraction are monotone, so no prefix
    of the run has an LLR above ``llr(n, d + D)`` or below ``llr(n + N, d)`` (N units, D of
    them nonconforming, in the run). When both lie strictly inside the boundaries and the cap
    is not reached, no record decides.
    """
    if state.status != MONITORING:
        return state, None, 0
    n, d = state.units, state.nonconforming
    if len(seqs) == 1:
        more_units, more_bad = units[0], bad[0]
    else:
        more_units, more_bad = sum(units), sum(bad)
    # plan.llr's own arithmetic, with the plan's constants read once
    g12, g2, cap = plan.g12, plan.g2, plan.max_units
    if ((d + more_bad) * g12 - n * g2 < plan.upper_llr - BOUNDARY_TOL
            and d * g12 - (n + more_units) * g2 > plan.lower_llr + BOUNDARY_TOL
            and (cap is None or n + more_units < cap)):
        return CycleState(MONITORING, n + more_units, d + more_bad), None, len(seqs)
    for i, seq in enumerate(seqs):
        state, decision, _ = apply_record(plan, state, Evidence(seq, units[i], bad[i],
                                                                received_at))
        if decision is not None:
            return state, decision, i + 1
    return state, None, len(seqs)


def replay(plan: SprtPlan, records, stop_seq: int | None = None) -> tuple[CycleState, list[bool]]:
    """Fold :func:`apply_record` over records in receipt order.

    ``stop_seq``: the cycle was closed by hand after this receipt number, so
    later records are not evidence. Returns the state and, per record, whether
    it counted as evidence.
    """
    state = CycleState()
    counted = []
    for rec in records:
        if stop_seq is not None and rec.seq > stop_seq:
            counted.append(False)
            continue
        state, _, used = apply_record(plan, state, rec)
        counted.append(used)
    return state, counted


def llr_path(plan: SprtPlan, records, counted) -> list[float | None]:
    """LLR after each record (None for records that were not evidence)."""
    units = bad = 0
    out = []
    for rec, used in zip(records, counted):
        if used:
            units += rec.units
            bad += rec.nonconforming
            out.append(float(plan.llr(units, bad)))
        else:
            out.append(None)
    return out
