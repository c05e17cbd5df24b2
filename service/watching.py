"""Watching a cleared facility: the plan option and the pure chart update.

After a cycle clears, every later record of the facility feeds the integer
Bernoulli CUSUM of :mod:`service.stats.watch` (S' = max(0, S + m X - 1) per
unit, signal at S' >= t). A record of several units is taken **nonconforming
units first**: that order gives the highest value the chart can reach within
the record, so the chart signals whenever any order of the record's units
would have signalled (the side that errs towards review, never towards
missing a drift). Its false-alarm rate is thus at most a little above the
per-unit figures for records of several units; with one unit per record it is
exactly the figures shown.

The update is a pure function ``(chart, state, record) -> (state, signal)``;
replaying a facility's records after the clear is a fold of it.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

WATCH_KEYS = {"arl0", "p1", "audits_per_year"}
#: The horizon of the false-alarm probability when a plan does not give its own
#: number of audits per year (our default; agencies set theirs).
DEFAULT_AUDITS_PER_YEAR = 250


@dataclass(frozen=True)
class WatchSpec:
    """``[plans.NAME.watch]``: the in-control ARL accepted, the rate to detect (default the
    plan's p1) and the audits a year (horizon of the false-alarm probability)."""

    arl0: float
    p1: float | None = None
    audits_per_year: int = DEFAULT_AUDITS_PER_YEAR

    def to_dict(self) -> dict:
        return {"arl0": self.arl0, "p1": self.p1, "audits_per_year": self.audits_per_year}


def watch_from_table(table, where: str) -> WatchSpec:
    """Check a ``watch`` table; raises ValueError saying what is wrong."""
    if not isinstance(table, dict):
        raise ValueError(f"{where}: watch must be a table with arl0 (and optional p1, "
                         f"audits_per_year)")
    unknown = set(table) - WATCH_KEYS
    if unknown:
        raise ValueError(f"{where}: watch has unknown key(s) {', '.join(sorted(unknown))}; "
                         f"allowed: {', '.join(sorted(WATCH_KEYS))}")
    if "arl0" not in table:
        raise ValueError(f"{where}: watch lacks arl0")
    arl0 = table["arl0"]
    if isinstance(arl0, bool) or not isinstance(arl0, (int, float)) or not math.isfinite(arl0) \
            or arl0 < 1:
        raise ValueError(f"{where}: watch.arl0 must be a number >= 1, got {arl0!r}")
    p1 = table.get("p1")
    if p1 is not None and (isinstance(p1, bool) or not isinstance(p1, (int, float))):
        raise ValueError(f"{where}: watch.p1 must be a number, got {p1!r}")
    year = table.get("audits_per_year", DEFAULT_AUDITS_PER_YEAR)
    if isinstance(year, bool) or not isinstance(year, int) or year < 1:
        raise ValueError(f"{where}: watch.audits_per_year must be a whole number >= 1, "
                         f"got {year!r}")
    return WatchSpec(arl0=float(arl0), p1=None if p1 is None else float(p1),
                     audits_per_year=year)


def design_for(p0: float, plan_p1: float, spec: WatchSpec):
    """The chart's exact figures for a plan (``service.stats.watch.design_watch``)."""
    from .stats.watch import design_watch
    p1 = plan_p1 if spec.p1 is None else spec.p1
    return design_watch(p0, p1, spec.arl0, spec.audits_per_year)


# -- the pure chart update ----------------------------------------------------------------------
class Chart(NamedTuple):
    """What the update needs: weight and limit (stored with the cycle it watches)."""

    m: int
    t: int


class WatchState(NamedTuple):
    """The chart after the records so far."""

    value: int = 0           # S, in units of r1
    units: int = 0           # units watched
    nonconforming: int = 0
    peak: int = 0            # highest S reached


class Signal(NamedTuple):
    """The chart reached its limit inside this record."""

    value: int               # S at the unit that reached t
    after_units: int         # units watched when it did


def apply_units(chart: Chart, state: WatchState, units: int,
                nonconforming: int) -> tuple[WatchState, Signal | None]:
    """Feed one record (``units`` units, ``nonconforming`` of them nonconforming) to the chart,
    nonconforming units first. Stops at the unit that reaches the limit (the rest of the
    record is not charted: the signal ends the watch).

    Closed form of the walk: d nonconforming units from S raise it by m - 1 each (no zero
    floor on the way up); the first that reaches t is the k-th with k = ceil((t - S)/(m - 1)).
    Then the units - d conforming units lower it by one each, floored at 0.
    """
    m, t = chart
    s = state.value
    d = nonconforming
    if d:
        need = -(-(t - s) // (m - 1))          # ceil((t - s) / (m - 1)), >= 1 since s < t
        if need <= d:
            value = s + need * (m - 1)
            after = state.units + need
            return (WatchState(value, after, state.nonconforming + need, max(state.peak, value)),
                    Signal(value=value, after_units=after))
        s += d * (m - 1)
    peak = max(state.peak, s)
    s = max(0, s - (units - d))
    return WatchState(s, state.units + units, state.nonconforming + d, peak), None


def apply_units_stepwise(chart: Chart, state: WatchState, units: int,
                         nonconforming: int) -> tuple[WatchState, Signal | None]:
    """The same update one unit at a time by the chart's definition (the reference the
    closed form above is tested against)."""
    m, t = chart
    s, n, bad, peak = state
    for i in range(units):
        x = i < nonconforming
        s = max(0, s + (m if x else 0) - 1)
        n += 1
        bad += x
        peak = max(peak, s)
        if s >= t:
            return WatchState(s, n, bad, peak), Signal(value=s, after_units=n)
    return WatchState(s, n, bad, peak), None


def replay(chart: Chart, records) -> tuple[WatchState, list[int], Signal | None]:
    """Fold :func:`apply_units` over ``(units, nonconforming)`` pairs in receipt order.

    Returns the state, the chart value after each record charted, and the signal (the
    fold stops at the record that signalled).
    """
    state = WatchState()
    path = []
    for units, bad in records:
        state, signal = apply_units(chart, state, units, bad)
        path.append(state.value)
        if signal is not None:
            return state, path, signal
    return state, path, None


def report_lines(wd) -> list[str]:
    """The chart in the plain-text plan report."""
    fa = wd.to_dict()["false_alarm_within"]
    return [
        "",
        "Watch after a clear (Bernoulli CUSUM, Reynolds & Stoumbos 1999, integer form)",
        f"  per unit: S = max(0, S + {wd.m} X - 1), X = 1 for a nonconforming unit; "
        f"signal when S >= {wd.t} (h = t/m = {wd.h:.4f})",
        f"  tuned to detect p1 = {wd.p1:g}; exact ARL (Markov chain, Brook & Evans 1972): "
        f"{wd.arl_p0:.1f} units at p0 (asked: >= {wd.arl0:g}), {wd.arl_p1:.1f} at p1",
        f"  chance of a false alarm within {fa['audits']} units at p0: {fa['probability']:.4f}",
    ]
