"""Replay of many cycles at once: the rule of :func:`service.verify.replay_counts` evaluated
for every cycle of a database in one pass of numpy over all records, with no Python step per
cycle.

Records come sorted by cycle (receipt order within each); ``bounds`` marks where each cycle's
records begin and end. Each cycle's plan enters as per-cycle arrays (``g1 + g2``, ``g2``, the
boundaries less/plus the tolerance, the cap and the cut), repeated onto its records. Running
counts are one cumulative sum less each cycle's offset; the first record at which a cycle's
LLR (from its counts, as ``SprtPlan.llr`` computes it) reaches a boundary or the cap is the
minimum, per cycle, of the indices where it does (``np.minimum.reduceat``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .stats import MONITORING
from .stats.sprt import BOUNDARY_TOL, CLEARED, FLAGGED


@dataclass(frozen=True)
class GroupReplay:
    """Per cycle: status, units, nonconforming, units at the decision (-1: none), and the
    per-record evidence flag (``counted``) of all records."""

    status: np.ndarray            # object array of status strings
    units: np.ndarray
    nonconforming: np.ndarray
    decided_after_units: np.ndarray
    at_cap: np.ndarray
    counted: np.ndarray


def replay_groups(bounds: np.ndarray, units: np.ndarray, bad: np.ndarray, g12: np.ndarray,
                  g2: np.ndarray, upper: np.ndarray, lower: np.ndarray, cap: np.ndarray,
                  cut: np.ndarray) -> GroupReplay:
    """Replay every cycle (each a non-empty run ``bounds[k]:bounds[k + 1]`` of records).

    ``cap`` holds each cycle's ``max_units`` (a huge number for none); the other per-cycle
    arrays are as named. Cycles closed by hand (a stop receipt number) are not for this
    function: their records after the stop are not evidence.
    """
    sizes = np.diff(bounds)
    count = units.size
    gid = np.repeat(np.arange(sizes.size), sizes)
    n_all = np.cumsum(units)
    d_all = np.cumsum(bad)
    start = bounds[:-1]
    before_n = np.where(start > 0, n_all[np.maximum(start - 1, 0)], 0)
    before_d = np.where(start > 0, d_all[np.maximum(start - 1, 0)], 0)
    n = n_all - np.repeat(before_n, sizes)
    d = d_all - np.repeat(before_d, sizes)
    llr = d * g12[gid] - n * g2[gid]          # SprtPlan.llr: d (g1 + g2) - n g2
    up = llr >= (upper - BOUNDARY_TOL)[gid]
    down = llr <= (lower + BOUNDARY_TOL)[gid]
    at = n >= cap[gid]
    where = np.where(up | down | at, np.arange(count), count)
    first = np.minimum.reduceat(where, start) if count else np.zeros(0, dtype=np.int64)
    stopped = first < bounds[1:]
    last = np.where(stopped, first, bounds[1:] - 1)
    counted = np.arange(count) <= np.repeat(np.where(stopped, first, count), sizes)
    ul, dl, al = up[last], down[last], at[last]
    cut_flag = llr[last] >= cut - BOUNDARY_TOL
    status = np.where(~stopped, MONITORING,
                      np.where(ul, FLAGGED, np.where(dl, CLEARED,
                                                     np.where(cut_flag, FLAGGED, CLEARED))))
    return GroupReplay(status=status.astype(object), units=n[last], nonconforming=d[last],
                       decided_after_units=np.where(stopped, n[last], -1),
                       at_cap=stopped & al & ~ul & ~dl, counted=counted)
