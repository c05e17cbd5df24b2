"""apply_run (a facility's records of one batch in one step) equals the record-by-record fold.

The check value is the fold of apply_record itself, whose decisions the hand-computed LLR tests
in test_api_decisions.py pin down; here hypothesis searches for any run, plan or starting
state, near the boundaries and the cap included, where the shortcut would differ.
"""
from hypothesis import given, settings, strategies as st

from service.monitor import CLOSED, CycleState, Evidence, apply_record, apply_run
from service.stats import SprtPlan

PLANS = [SprtPlan.wald(0.02, 0.08, 0.05, 0.10),
         SprtPlan.wald(0.04, 0.12, 0.05, 0.10, max_units=40, cut_llr=0.5),
         SprtPlan.wald(0.45, 0.55, 0.01, 0.01),
         SprtPlan.wald(0.10, 0.30, 0.10, 0.10, max_units=12, cut_llr=0.0)]


def fold(plan, state, seqs, units, bad, at):
    decision, counted = None, 0
    for seq, u, b in zip(seqs, units, bad):
        state, made, used = apply_record(plan, state, Evidence(seq, u, b, at))
        counted += used
        decision = decision or made
    return state, decision, counted


@st.composite
def runs(draw):
    plan = PLANS[draw(st.integers(0, len(PLANS) - 1))]
    # a starting state reached by a fold, so it is one the service can hold
    # small units as often as large ones, so that runs end exactly at a cap of 12 or 40
    most = draw(st.sampled_from([1, 2, 6]))
    start = draw(st.lists(st.tuples(st.integers(1, most), st.integers(0, 1)), max_size=45))
    state = CycleState()
    for i, (u, b) in enumerate(start):
        state, _, _ = apply_record(plan, state, Evidence(i + 1, u, min(u, b), "t0"))
    if draw(st.booleans()) and state.is_open and draw(st.integers(0, 9)) == 0:
        state = CycleState(CLOSED, state.units, state.nonconforming)
    recs = draw(st.lists(st.tuples(st.integers(1, most), st.integers(0, most)), max_size=40))
    units = [u for u, _ in recs]
    bad = [min(u, b) for u, b in recs]
    seqs = list(range(100, 100 + len(recs)))
    return plan, state, seqs, units, bad


@settings(max_examples=1500, deadline=None)
@given(runs())
def test_a_run_equals_the_fold(run):
    plan, state, seqs, units, bad = run
    assert apply_run(plan, state, seqs, units, bad, "t1") == fold(plan, state, seqs, units, bad,
                                                                   "t1")


def test_a_run_that_ends_at_the_cap_is_decided_by_the_cut_rule():
    plan = PLANS[3]       # p0 0.10, p1 0.30, cap 12, cut 0.0; by hand: llr(12, 2) = -0.316
    state = CycleState(units=10, nonconforming=2)
    got, decision, counted = apply_run(plan, state, [11, 12], [1, 1], [0, 0], "t")
    assert (got.status, got.at_cap, counted, decision.after_units) == ("cleared", True, 2, 12)


def test_a_run_that_crosses_stops_counting_at_the_deciding_record():
    plan = PLANS[0]       # p0 0.02, p1 0.08: three nonconforming units in a row flag it
    state, decision, counted = apply_run(plan, CycleState(), [1, 2, 3, 4, 5], [1] * 5,
                                         [1] * 5, "t")
    assert (state.status, state.decided_seq, counted, decision.after_units) == (
        "flagged", 3, 3, 3)
    assert plan.decide(2, 2) == "monitoring" and plan.decide(3, 3) == "flagged"
