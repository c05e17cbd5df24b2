"""The audit program: pure decisions about the whole register (no SQL, no clock).

* :func:`forecast` — exact per-cycle figures conditioned on each open cycle's
  (n, d), their sums over the register, and with a weekly budget the weeks to
  decide half and 90 % of the open cycles (seeded simulation from the exact
  per-cycle stop distributions).
* :func:`visit_scores` / :func:`allocate` — this week's visits: a score of our
  own from past records only, the units per facility under the budget, and the
  reason in words.

Visit score (points, higher first; every term uses only what is already
recorded, never the outcome of a unit not yet audited):

==================  =========================================================
never audited       2.5 when the open cycle has no counted unit yet
leaning to a flag   2 x lean, lean = max(0, 2 x position - 1), where position
                    = (LLR - b) / (a - b) is where the LLR stands between the
                    clear boundary b (0) and the flag boundary a (1)
could decide now    1.5 when a visit of ``per_visit`` conforming units would
                    clear the cycle (ceil((LLR - b) / g2) <= per_visit), or
                    two nonconforming units would flag it
gone stale          min(days since the last record / stale days, 2)
watch chart high    2 when the facility's watch chart is at its high level
==================  =========================================================

Units per facility: as many as would clear the cycle if all conform
(ceil((LLR - b) / g2)), at least 1 and at most ``per_visit``; facilities are
served in score order until the budget is spent (the last one may get fewer).

Why choosing facilities this way leaves every facility's own error rates
unchanged is argued in the README ("Running the audit program") and checked by
tests/test_program_simulation.py.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .stats.register import QUANTILES, conditioned
from .stats.sprt import SprtPlan

NEVER_POINTS = 2.5
LEAN_POINTS = 2.0
NEAR_POINTS = 1.5
STALE_CAP = 2.0
WATCH_POINTS = 2.0
PER_VISIT = 20
RUNS = 200
SEED = 20260415
SHARES = (0.5, 0.9)


# -- register forecast ----------------------------------------------------------------
@dataclass(frozen=True)
class OpenCycle:
    """One open cycle as the forecast needs it."""

    facility_id: str
    cycle: int
    plan_key: str          # groups cycles sharing a plan (e.g. the snapshot text)
    plan: SprtPlan
    n: int
    d: int


def forecast(cycles: list[OpenCycle], budget: int | None = None, runs: int = RUNS,
             seed: int = SEED) -> dict:
    """:func:`forecast_columns` for a list of :class:`OpenCycle`."""
    plans = {c.plan_key: c.plan for c in cycles}
    return forecast_columns([c.facility_id for c in cycles], [c.cycle for c in cycles],
                            [c.plan_key for c in cycles], plans,
                            [c.n for c in cycles], [c.d for c in cycles],
                            budget=budget, runs=runs, seed=seed)


ROW_KEYS = ("facility_id", "cycle", "units", "nonconforming", "llr",
            "p_flag_p0", "p_clear_p0", "p_flag_p1", "p_clear_p1", "further_p0", "further_p1",
            *(f"further_p{r}_q{round(q * 100)}" for r in (0, 1) for q in QUANTILES))


def forecast_columns(facility_ids: list[str], cycle_nos: list[int], plan_keys: list[str],
                     plans: dict, n, d, budget: int | None = None, runs: int = RUNS,
                     seed: int = SEED) -> dict:
    """Exact per-cycle figures, register totals and (with ``budget``) weeks to decide.

    Cycles come column by column; ``plans`` maps each plan key (e.g. the stored
    snapshot text) to its plan. Cycles are grouped by plan and each distinct
    (n, d) is computed once (:func:`service.stats.register.conditioned`).
    """
    size = len(facility_ids)
    n = np.asarray(n, dtype=np.int64).reshape(-1)
    d = np.asarray(d, dtype=np.int64).reshape(-1)
    # plans in the order the cycles first name them (not the mapping's order, which may
    # come from a set): the weeks' random stream is then the same in every process
    keys = [k for k in dict.fromkeys(plan_keys) if k in plans]
    code = {k: i for i, k in enumerate(keys)}
    group = np.fromiter((code[k] for k in plan_keys), dtype=np.int64, count=size)
    cols = {name: np.zeros(size) for name in ("p_flag_p0", "p_clear_p0", "p_flag_p1",
                                               "p_clear_p1", "further_p0", "further_p1", "llr")}
    qcols = {(r, q): np.zeros(size, dtype=np.int64) for r in (0, 1) for q in QUANTILES}
    laws = []
    for g, key in enumerate(keys):
        idx = np.flatnonzero(group == g)
        if idx.size == 0:
            continue
        plan = plans[key]
        fig = conditioned(plan, n[idx], d[idx], [plan.p0, plan.p1],
                          keep_distribution=budget is not None)
        cols["p_flag_p0"][idx], cols["p_flag_p1"][idx] = fig.p_flag
        cols["p_clear_p0"][idx], cols["p_clear_p1"][idx] = fig.p_clear
        cols["further_p0"][idx], cols["further_p1"][idx] = fig.further
        for q in QUANTILES:
            qcols[(0, q)][idx], qcols[(1, q)][idx] = fig.quantiles[q]
        cols["llr"][idx] = plan.llr(n[idx], d[idx])
        laws.append((idx, fig))
    columns = [facility_ids, cycle_nos, n.tolist(), d.tolist(), cols["llr"].tolist(),
               *(cols[k].tolist() for k in ("p_flag_p0", "p_clear_p0", "p_flag_p1",
                                            "p_clear_p1", "further_p0", "further_p1")),
               *(qcols[(r, q)].tolist() for r in (0, 1) for q in QUANTILES)]
    rows = [dict(zip(ROW_KEYS, values)) for values in zip(*columns)]
    out = {"totals": {"open_cycles": size,
                      "expected_false_flags": float(cols["p_flag_p0"].sum()),
                      "expected_missed": float(cols["p_clear_p1"].sum()),
                      "expected_audits_p0": float(cols["further_p0"].sum()),
                      "expected_audits_p1": float(cols["further_p1"].sum())},
           "cycles": rows}
    if budget is not None:
        out["weeks"] = weeks_to_decide(laws, size, (cols["further_p0"], cols["further_p1"]),
                                       budget, runs, seed)
    return out


def weeks_to_decide(laws, size: int, expected, budget: int, runs: int = RUNS,
                    seed: int = SEED, shares=SHARES) -> dict:
    """Weeks to decide a share of the open cycles at ``budget`` audits a week.

    Model (ours, stated with the answer): each run draws every open cycle's
    further units from its exact stop distribution (inverse transform); the
    budget goes to the open cycles one at a time in order of fewest expected
    further units, each audited until it decides. The k-th cycle in that order
    is decided in week ceil(S_k / budget), S_k the sum of the first k draws;
    the share s is reached when cycle ceil(s x open) is. Reported per rate:
    the mean over ``runs`` runs and its standard error (sd / sqrt(runs)).
    """
    if size == 0:
        return {"budget": budget, "runs": runs, "seed": seed,
                **{f"p{r}": {f"weeks_{round(s * 100)}": 0.0 for s in shares} for r in (0, 1)}}
    rng = np.random.default_rng(seed)
    out = {"budget": budget, "runs": runs, "seed": seed,
           "model": "each open cycle audited until it decides, fewest expected further "
                    "audits first; further audits drawn from the exact stop distribution"}
    ks = sorted({max(1, math.ceil(s * size)) for s in shares})
    for r in (0, 1):
        # place of each cycle in the queue (fewest expected further audits first)
        place = np.empty(size, dtype=np.int64)
        place[np.argsort(expected[r], kind="stable")] = np.arange(size)
        # S_k for the k asked, per run: the draws of the cycles placed before k, summed
        # (whole numbers: the same in any order)
        sums = {k: np.zeros(runs, dtype=np.int64) for k in ks}
        for idx_a, fig in laws:
            # one uniform per (run, cycle), drawn run by run, mapped through the cycle's
            # exact law; the draws are made cycle by cycle, cycles of one distinct state
            # side by side (the same pairs of uniform and state: the searches of the
            # inverse transform then stay within one row of the law's tables)
            m = idx_a.size
            u = rng.random(runs * m).reshape(runs, m)
            by = np.argsort(fig.index, kind="stable")
            got = fig.draw_many(r, np.repeat(by, runs), u[:, by].T.reshape(-1)).reshape(m, runs)
            before = place[idx_a[by]]
            every = None
            for k in ks:
                first = before < k
                if 2 * np.count_nonzero(first) <= m:
                    sums[k] += got[first].sum(axis=0)
                else:                       # most rows: the whole sum less the others
                    every = got.sum(axis=0) if every is None else every
                    sums[k] += every - got[~first].sum(axis=0)
        row = {}
        for s in shares:
            weeks = np.ceil(sums[max(1, math.ceil(s * size))] / budget)
            row[f"weeks_{round(s * 100)}"] = float(weeks.mean())
            row[f"weeks_{round(s * 100)}_se"] = float(weeks.std(ddof=1) / math.sqrt(runs)) \
                if runs > 1 else None
        out[f"p{r}"] = row
    return out


# -- register-level error target ---------------------------------------------------
def register_lines(info: dict) -> list[str]:
    """Text for `seqaudit plan --register-size K --register-false-flags F`."""
    k, f = info["size"], info["false_flags"]
    lines = [f"Register of {k} facilities, {f:g} false flag(s) allowed",
             f"  alpha per facility = F / K = {info['alpha_per_facility']:.6g} "
             "(Bonferroni: expected false flags over the register = F)"]
    if info["alpha_sidak"] is not None:
        lines.append(f"  Sidak alpha = 1 - (1 - F)^(1/K) = {info['alpha_sidak']:.6g} "
                     "(chance of any false flag = F for independent facilities; "
                     "Sidak 1967, JASA 62:626-633)")
    else:
        lines.append("  Sidak alpha: not defined for F >= 1 (it bounds a probability)")
    extra = info["asn_p0_register"] / info["asn_p0_original"] - 1.0
    lines.append(f"  units expected at p0: {info['asn_p0_original']:.2f} at alpha "
                 f"{info['alpha_original']:g}, {info['asn_p0_register']:.2f} at alpha "
                 f"{info['alpha_per_facility']:.6g} ({100 * extra:+.0f} %)")
    lines.append("  The plan below is the plan at the per-facility alpha.")
    return lines


# -- this week's visits -------------------------------------------------------------
@dataclass(frozen=True)
class VisitInputs:
    """Arrays over open cycles (one per facility) for the visit score.

    ``upper``, ``lower``, ``g1``, ``g2`` are each cycle's plan numbers;
    ``age_days`` is the time since the cycle's last record (or since it
    opened); ``watch_high`` marks facilities whose watch chart is high.
    """

    n: np.ndarray
    d: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    g1: np.ndarray
    g2: np.ndarray
    age_days: np.ndarray
    stale_days: np.ndarray
    watch_high: np.ndarray


@dataclass(frozen=True)
class VisitScores:
    score: np.ndarray
    units: np.ndarray          # units wanted per visit
    position: np.ndarray
    to_clear: np.ndarray
    to_flag: np.ndarray
    parts: dict


def visit_scores(x: VisitInputs, per_visit: int = PER_VISIT) -> VisitScores:
    """The documented visit score (module docstring), vectorised over cycles.

    Each term is the expression of the table above; temporaries are reused in place
    (the figures are the same as computing every term on its own).
    """
    llr = x.d * (x.g1 + x.g2) - x.n * x.g2
    from_clear = llr - x.lower                                  # LLR - b
    position = from_clear / (x.upper - x.lower)
    np.minimum(np.maximum(position, 0.0, out=position), 1.0, out=position)
    to_clear = _at_least_one(from_clear / x.g2)
    to_flag = _at_least_one((x.upper - llr) / x.g1)
    never = np.where(x.n == 0, NEVER_POINTS, 0.0)
    lean = np.multiply(position, 2.0)
    lean -= 1.0
    np.maximum(lean, 0.0, out=lean)
    lean *= LEAN_POINTS
    near = np.where((to_clear <= per_visit) | (to_flag <= 2), NEAR_POINTS, 0.0)
    stale = np.divide(x.age_days, x.stale_days)
    np.minimum(stale, STALE_CAP, out=stale)
    watch = np.where(x.watch_high, WATCH_POINTS, 0.0)
    score = never + lean
    score += near
    score += stale
    score += watch
    units = np.minimum(to_clear, per_visit)                     # to_clear is at least 1
    return VisitScores(score=score, units=units, position=position, to_clear=to_clear,
                       to_flag=to_flag, parts={"never": never, "lean": lean, "near": near,
                                               "stale": stale, "watch": watch})


def _at_least_one(units: np.ndarray) -> np.ndarray:
    """max(ceil(units - 1e-9), 1) as int64 (``units`` is overwritten)."""
    units -= 1e-9
    np.ceil(units, out=units)
    np.maximum(units, 1.0, out=units)
    return units.astype(np.int64)


def rank(score: np.ndarray) -> np.ndarray:
    """Indices in visit order: score descending, ties by position (rows come in id order)."""
    return np.argsort(-score, kind="stable")


def allocate(units: np.ndarray, score: np.ndarray, budget: int,
             group: np.ndarray | None = None) -> np.ndarray:
    """Units given to each cycle when each group's budget is spent in visit order.

    ``group`` (e.g. the run of a simulation) gives every group its own budget;
    cycles with a score of -inf are never served.
    """
    size = score.size
    if group is None:
        order = np.argsort(-score, kind="stable")          # ties keep the row (id) order
        want = np.where(np.isfinite(score), units, 0)[order]
        before = np.cumsum(want) - want
    else:
        order = np.lexsort((np.arange(size), -score, group))
        want = np.where(np.isfinite(score), units, 0)[order]
        done = np.cumsum(want) - want
        g = group[order]
        starts = np.flatnonzero(np.r_[True, g[1:] != g[:-1]]) if size else np.zeros(0, dtype=int)
        lengths = np.diff(np.r_[starts, size])
        before = done - np.repeat(done[starts], lengths)
    give = np.clip(budget - before, 0, want)
    out = np.zeros(size, dtype=np.int64)
    out[order] = give
    return out


def serve(units: np.ndarray, score: np.ndarray, budget: int) -> tuple[np.ndarray, np.ndarray]:
    """The cycles served, in visit order, and the units each gets: :func:`allocate` then
    :func:`rank` of the served ones, for a single budget and finite scores.

    Every cycle served takes at least one unit, so at most ``budget`` are served: only the
    cycles scoring at least a bound that ``budget`` scores reach are sorted (score
    descending, ties in row order); the ``budget`` highest are among them, so their first
    ``budget`` places are those of sorting all cycles (:func:`_top_rows`).

    Parameters
    ----------
    units : numpy.ndarray of int
        Units wanted by each cycle, each at least 1.
    score : numpy.ndarray of float
        Visit score of each cycle (finite).
    budget : int
        Audits available (at least 1).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Row indices in visit order, and the units given to each (all positive).
    """
    size = score.size
    if budget < size:
        rows = _top_rows(score, budget)
        order = rows[np.argsort(-score[rows], kind="stable")]
    else:
        order = np.argsort(-score, kind="stable")
    want = units[order]
    before = np.cumsum(want) - want
    served = np.count_nonzero(before < budget)     # a prefix: units are at least 1
    return order[:served], np.minimum(want[:served], budget - before[:served])


def _top_rows(score: np.ndarray, budget: int) -> np.ndarray:
    """Rows (in row order) of the scores at or above a bound that at least ``budget``
    scores reach: every one of the ``budget`` highest scores is among them.

    The bound is first read from an evenly spaced sample of the scores (about
    4 x ``budget`` of them, a few places below the sample's share of ``budget``);
    when fewer than ``budget`` scores reach it, the ``budget``-th highest score is
    taken instead (np.sort, not np.partition: the scores have many ties, on which
    numpy's selection is several times slower than its sort).
    """
    size = score.size
    step = size // (4 * budget)
    if step >= 2:
        sample = np.sort(score[::step])
        j = -(-budget // step) + 8
        if j <= sample.size:
            rows = np.flatnonzero(score >= sample[sample.size - j])
            if rows.size >= budget:
                return rows
    return np.flatnonzero(score >= np.sort(score)[size - budget])


def reason(parts: dict, i: int, position: float, to_clear: int, to_flag: int, age_days: float,
           stale_days: float, units: int) -> str:
    """The score of cycle ``i`` in words."""
    words = []
    if parts["never"][i] > 0:
        words.append("never audited in this cycle")
    if parts["watch"][i] > 0:
        words.append("watch chart high")
    if parts["lean"][i] > 0:
        words.append(f"leaning toward a flag ({100 * position:.0f} % of the way from the clear "
                     f"to the flag boundary; {to_flag} nonconforming unit(s) in a row would flag)")
    if parts["near"][i] > 0 and parts["never"][i] == 0:
        if to_clear <= units:
            words.append(f"{to_clear} conforming unit(s) would clear it")
        elif to_flag <= 2:
            words.append(f"{to_flag} nonconforming unit(s) would flag it")
    if age_days >= stale_days:
        words.append(f"no record for {age_days:.0f} days")
    if not words:
        words.append(f"routine: {to_clear} conforming unit(s) from clearing")
    return "; ".join(words)
