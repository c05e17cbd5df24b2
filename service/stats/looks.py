"""Exact risks of a plan for the looks that really happened.

A plan's figures assume a look after every ``visit_units`` units. When the records of a
cycle hold other numbers of units, the boundaries were in fact looked at after each record;
the plan's risks for that sequence of looks (followed, after the last record, by looks every
``visit_units`` units again) come from the same path counts as :mod:`service.stats.exact`,
with the looks placed at the records' cumulative unit counts. With a cap, the cap is a look;
a record that runs past the cap is counted as if the cap had been looked at exactly.

References
----------
.. [1] C. Jennison and B. W. Turnbull, "Group Sequential Methods with Applications to
       Clinical Trials", Chapman & Hall/CRC, 2000, ch. 19 (exit probabilities for any
       sequence of group sizes).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .exact import MAX_STEPS, PathCounts
from .sprt import SprtPlan


@dataclass(frozen=True)
class LooksFigures:
    """alpha', beta', E[N] at p0 and p1 for the given looks, and the probability left open."""

    alpha: float
    beta: float
    asn_p0: float
    asn_p1: float
    residual: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def sizes_differ(sizes, visit_units: int) -> bool:
    """Whether any record holds other than ``visit_units`` units."""
    return any(int(m) != int(visit_units) for m in sizes)


def looks_figures(plan: SprtPlan, sizes, max_steps: int = MAX_STEPS) -> LooksFigures:
    """Exact figures of ``plan`` when its first looks come after records of ``sizes`` units.

    Rates are the plan's own (apparent) p0 and p1.
    """
    sizes = [int(m) for m in sizes]
    if any(m < 1 for m in sizes):
        raise ValueError("every record holds at least one unit")
    counts = PathCounts(plan, max_steps=max_steps, first_looks=np.cumsum(sizes))
    res = counts.summary([plan.p0, plan.p1])
    return LooksFigures(alpha=float(res.p_flag[0]), beta=float(res.p_clear[1]),
                        asn_p0=float(res.asn[0]), asn_p1=float(res.asn[1]),
                        residual=float(res.residual.max()))
