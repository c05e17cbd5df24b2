"""This week's visits (service/program_ops.visits) against a plain-Python computation.

The reference below reads the same columns row by row with the stdlib only (``math``,
``datetime``): the visit score of the README ("Running the audit program") term by term,
then the rule "serve the facilities in score order, ties in facility order, each the
units that would clear it if all conform (1 to per_visit), until the budget is spent".
Register, times and watch marks come from numpy.random.default_rng with fixed seeds.
The score's terms are the same IEEE operations in the same order in both, so the figures
must be equal exactly, not within a tolerance.
"""
import json
import math
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service import program, program_ops
from service.operations import PlanBook
from service.stats.sprt import SprtPlan
from service.store import plan_of

NOW = "2026-12-01T08:00:00.000000Z"


class Columns:
    """A store that hands out open-cycle columns already built (no SQLite)."""

    def __init__(self, columns):
        self.columns = columns

    def open_cycle_columns(self, region=None):
        return self.columns

    def region_known(self, region):
        return True


def register(book: PlanBook, size: int, seed: int, odd_times: bool = False) -> dict:
    rng = np.random.default_rng(seed)
    names = sorted(book.specs)
    texts = {name: json.dumps(book.snapshot(name), sort_keys=True) for name in names}
    now = datetime.fromisoformat(NOW.replace("Z", "+00:00"))
    cols = {k: [] for k in ("facility_id", "name", "plan", "region", "cycle", "plan_json",
                            "units", "nonconforming", "since")}
    for i in range(size):
        name = names[int(rng.integers(len(names)))]
        plan = book.plan(name)
        n = int(rng.integers(0, 120)) if rng.random() < 0.9 else 0
        d = int(rng.binomial(n, plan.p1 if rng.random() < 0.3 else plan.p0))
        # keep the cycle open: walk back until the plan still monitors
        while n and book.plan(name).decide(n, d) != "monitoring":
            n, d = n - 1, min(d, n - 1)
        at = now - timedelta(microseconds=int(rng.integers(0, 40 * 86400 * 10**6)))
        since = at.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        if odd_times and i % 7 == 0:
            since = at.strftime("%Y-%m-%dT%H:%M:%SZ")        # another width, still RFC 3339
        for key, value in (("facility_id", f"F{i:05d}"), ("name", f"Scale {i}"), ("plan", name),
                           ("region", "north"), ("cycle", 1),
                           # a text object of its own per row, as SQLite returns them
                           ("plan_json", (texts[name] + " ")[:-1]), ("units", n),
                           ("nonconforming", d), ("since", since)):
            cols[key].append(value)
    return cols


def plain_visits(cols, book, budget, per_visit, high=frozenset(), stale_default=14.0):
    """Row by row with math and datetime: (facility_id, units, score) in visit order."""
    now = datetime.fromisoformat(NOW.replace("Z", "+00:00"))
    scored = []
    for i, key in enumerate(cols["plan_json"]):
        plan = plan_of(key)
        spec = book.specs.get(cols["plan"][i])
        stale_days = (spec.stale_after_days if spec and spec.stale_after_days
                      else stale_default)
        n, d = cols["units"][i], cols["nonconforming"][i]
        llr = d * (plan.g1 + plan.g2) - n * plan.g2
        pos = min(max((llr - plan.lower_llr) / (plan.upper_llr - plan.lower_llr), 0.0), 1.0)
        to_clear = max(math.ceil((llr - plan.lower_llr) / plan.g2 - 1e-9), 1)
        to_flag = max(math.ceil((plan.upper_llr - llr) / plan.g1 - 1e-9), 1)
        at = datetime.fromisoformat(cols["since"][i].replace("Z", "+00:00"))
        age = ((now - at) // timedelta(microseconds=1)) / 86_400e6
        score = ((program.NEVER_POINTS if n == 0 else 0.0)
                 + program.LEAN_POINTS * max(0.0, 2.0 * pos - 1.0)
                 + (program.NEAR_POINTS if to_clear <= per_visit or to_flag <= 2 else 0.0)
                 + min(age / stale_days, program.STALE_CAP)
                 + (program.WATCH_POINTS if cols["facility_id"][i] in high else 0.0))
        scored.append((-score, i, min(to_clear, per_visit)))
    scored.sort()
    left, out = budget, []
    for neg, i, units in scored:
        if left <= 0:
            break
        out.append((cols["facility_id"][i], min(units, left), -neg))
        left -= min(units, left)
    return out


@pytest.fixture
def book(settings):
    return PlanBook(settings.plans)


@pytest.mark.parametrize("size, budget, per_visit, seed", [
    (3000, 400, 20, 1), (3000, 25, 5, 2), (200, 5000, 20, 3), (1, 1, 1, 4), (500, 499, 1, 5),
])
def test_visits_equal_the_plain_loop(book, size, budget, per_visit, seed):
    cols = register(book, size, seed)
    rng = np.random.default_rng(seed + 100)
    high = {f for f in cols["facility_id"] if rng.random() < 0.05}
    out = program_ops.visits(Columns(cols), book, NOW, budget, per_visit=per_visit,
                             watch_high=lambda ids: high)
    got = [(v["facility_id"], v["units"], v["score"]) for v in out["visits"]]
    want = plain_visits(cols, book, budget, per_visit, high)
    assert [g[:2] for g in got] == [w[:2] for w in want]
    assert [g[2] for g in got] == [round(w[2], 4) for w in want]
    assert out["units"] == min(budget, sum(w[1] for w in plain_visits(cols, book, 10**9,
                                                                      per_visit, high)))


def test_other_time_widths_give_the_same_visits(book):
    # rows whose time is another RFC 3339 width go through the one-by-one reader
    cols = register(book, 700, 9, odd_times=True)
    out = program_ops.visits(Columns(cols), book, NOW, 300)
    assert ([(v["facility_id"], v["units"]) for v in out["visits"]]
            == [w[:2] for w in plain_visits(cols, book, 300, program.PER_VISIT)])


def test_a_bad_stored_time_is_refused(book):
    cols = register(book, 50, 11)
    cols["since"][17] = "2026-02-30T09:00:00.000000Z"
    with pytest.raises(ValueError, match="2026-02-30"):
        program_ops.visits(Columns(cols), book, NOW, 10)


def test_an_empty_register(book):
    cols = {k: [] for k in ("facility_id", "name", "plan", "region", "cycle", "plan_json",
                            "units", "nonconforming", "since")}
    out = program_ops.visits(Columns(cols), book, NOW, 10)
    assert out["visits"] == [] and out["units"] == 0 and out["open_cycles"] == 0


def test_many_snapshots_get_their_own_plan_numbers():
    # more than 256 distinct snapshot texts, some first seen 256 rows apart: each row still
    # gets its own snapshot's numbers (compared with plan_of row by row)
    keys = []
    for k in range(300):
        p = SprtPlan.wald(0.01 + k * 1e-4, 0.08, 0.05, 0.10)
        keys.append('{"alpha": 0.05, "beta": 0.1, "cut_llr": 0.0, "lower_llr": %r, '
                    '"max_units": null, "p0": %r, "p1": 0.08, "upper_llr": %r}'
                    % (p.lower_llr, p.p0, p.upper_llr))
    rng = np.random.default_rng(12)
    rows = [keys[0]] * 256 + [keys[1]] + [keys[int(j)] for j in rng.integers(0, 300, 3000)]
    got = program_ops._plan_columns(rows, None, 14.0)
    want = np.array([[plan_of(r).upper_llr, plan_of(r).lower_llr, plan_of(r).g1,
                      plan_of(r).g2, 14.0] for r in rows]).T
    np.testing.assert_array_equal(got, want)


def allocate_then_rank(units, score, budget):
    """The earlier two-step path: allocate() over all cycles, then rank() the served."""
    give = program.allocate(units, score, budget)
    chosen = np.flatnonzero(give > 0)
    chosen = chosen[program.rank(score[chosen])]
    return chosen, give[chosen]


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([0.0, 0.5, 1.25, 1.25 + 1e-12, 2.0 - 1e-13, 2.0,
                                           3.5, 4.75, 1e-30, -1e-30]),
                          st.integers(1, 20)), max_size=300),
       st.integers(1, 400))
def test_serve_equals_allocate_and_rank(rows, budget):
    # scores from a few values (many ties, some very close) and wanted units 1-20
    score = np.array([r[0] for r in rows], dtype=float)
    units = np.array([r[1] for r in rows], dtype=np.int64)
    chosen, give = program.serve(units, score, budget)
    ref_chosen, ref_give = allocate_then_rank(units, score, budget)
    assert chosen.tolist() == ref_chosen.tolist() and give.tolist() == ref_give.tolist()
    # and the rule in words, plain Python
    left, plain = budget, []
    for _, i in sorted((-s, i) for i, s in enumerate(score.tolist())):
        if left <= 0:
            break
        plain.append((i, min(int(units[i]), left)))
        left -= plain[-1][1]
    assert list(zip(chosen.tolist(), give.tolist())) == plain


def test_visit_scores_equal_the_formula_row_by_row():
    # seeded inputs over the whole range of positions, ages and plans; exact equality
    rng = np.random.default_rng(31)
    size = 4000
    plans = [plan_of('{"alpha": 0.05, "beta": 0.1, "cut_llr": 0.0, "lower_llr": %r, '
                     '"max_units": null, "p0": %r, "p1": %r, "upper_llr": %r}'
                     % (p.lower_llr, p.p0, p.p1, p.upper_llr))
             for p in (SprtPlan.wald(0.02, 0.08, 0.05, 0.1),
                       SprtPlan.wald(0.05, 0.15, 0.01, 0.2))]
    which = rng.integers(0, 2, size)
    n = rng.integers(0, 200, size)
    d = rng.binomial(n, 0.08)
    pick = lambda attr: np.array([getattr(plans[w], attr) for w in which])   # noqa: E731
    x = program.VisitInputs(n=n, d=d, upper=pick("upper_llr"), lower=pick("lower_llr"),
                            g1=pick("g1"), g2=pick("g2"), age_days=rng.random(size) * 50 - 2,
                            stale_days=rng.choice([7.0, 14.0], size),
                            watch_high=rng.random(size) < 0.1)
    s = program.visit_scores(x, 20)
    for i in range(size):
        llr = int(d[i]) * (x.g1[i] + x.g2[i]) - int(n[i]) * x.g2[i]
        pos = min(max((llr - x.lower[i]) / (x.upper[i] - x.lower[i]), 0.0), 1.0)
        to_clear = max(math.ceil((llr - x.lower[i]) / x.g2[i] - 1e-9), 1)
        to_flag = max(math.ceil((x.upper[i] - llr) / x.g1[i] - 1e-9), 1)
        score = ((2.5 if n[i] == 0 else 0.0) + 2.0 * max(0.0, 2.0 * pos - 1.0)
                 + (1.5 if to_clear <= 20 or to_flag <= 2 else 0.0)
                 + min(x.age_days[i] / x.stale_days[i], 2.0) + (2.0 if x.watch_high[i] else 0.0))
        assert (s.score[i], s.position[i], s.to_clear[i], s.to_flag[i], s.units[i]) == \
            (score, pos, to_clear, to_flag, min(to_clear, 20))


@pytest.mark.parametrize("arrangement", ["shuffled", "ascending", "descending", "off_sample"])
def test_serve_on_large_registers_equals_allocate_and_rank(arrangement):
    # seeded scores with many ties, in orders that make the sampled bound close, too low
    # (many more rows than needed) or too high (too few rows: the fallback is used)
    rng = np.random.default_rng(44)
    size = 20_000
    score = np.round(rng.random(size) * 8, 1) + np.where(rng.random(size) < 0.3, 2.5, 0.0)
    if arrangement == "ascending":
        score.sort()
    elif arrangement == "descending":
        score = -np.sort(-score)
    elif arrangement == "off_sample":
        # only the rows a budget of 400 samples (every 12th) score above 0: the sample's
        # bound is reached by too few rows, and the budget-th highest score is taken
        score = np.zeros(size)
        score[::12] = rng.random(score[::12].size) + 1.0
    units = rng.integers(1, 21, size)
    for budget in (1, 7, 25, 400, 2_499, 5_000, 19_999, 20_000, 50_000):
        chosen, give = program.serve(units, score, budget)
        ref_chosen, ref_give = allocate_then_rank(units, score, budget)
        assert chosen.tolist() == ref_chosen.tolist() and give.tolist() == ref_give.tolist()
