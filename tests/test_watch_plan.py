"""The watch option of a plan: configuration, `GET /v1/plans/{name}`, `seqaudit plan --json`,
the workbench, and the pure chart update (closed form against the chart's unit-by-unit
definition, hypothesis-checked)."""
import json

import pytest
from hypothesis import given, settings as hsettings, strategies as st

from service.plans import ConfigError, plan_from_table
from service.stats.watch import design_watch, step
from service.watching import Chart, WatchState, apply_units, apply_units_stepwise, replay

from .test_cli_plan import run
from .test_ui_pages import ui  # noqa: F401  (the signed-in dashboard client)

BASE = {"p0": 0.02, "p1": 0.08, "alpha": 0.05, "beta": 0.1}


def test_config_watch_table_is_read():
    spec = plan_from_table("x", {**BASE, "watch": {"arl0": 500, "p1": 0.1}})
    assert spec.watch.arl0 == 500 and spec.watch.p1 == 0.1 and spec.watch.audits_per_year == 250


@pytest.mark.parametrize("watch, words", [
    ({"p1": 0.1}, "lacks arl0"),
    ({"arl0": 500, "colour": 1}, "unknown key"),
    ({"arl0": 0}, "arl0 must be a number >= 1"),
    ({"arl0": 500, "p1": 0.01}, "p1 must be larger than p0"),
    ({"arl0": 500, "audits_per_year": 0}, "audits_per_year"),
    (7, "must be a table"),
])
def test_config_watch_errors_say_what_is_wrong(watch, words):
    with pytest.raises(ConfigError) as err:
        plan_from_table("x", {**BASE, "watch": watch})
    assert words in str(err.value) and "[plans.x" in str(err.value)


def test_plan_route_shows_the_chart(client, keys):
    d = client.get("/v1/plans/dispensers", headers=keys.header("analyst")).json()
    # config/seqaudit.toml: [plans.dispensers.watch] arl0 = 2000, audits_per_year = 400
    w = design_watch(0.02, 0.08, 2000, 400)
    assert d["watch"] == w.to_dict()
    assert d["watch"]["arl_p0"] >= 2000 and d["watch"]["false_alarm_within"]["audits"] == 400
    capped = client.get("/v1/plans/scales_capped", headers=keys.header("analyst")).json()
    assert capped["watch"] is None


def test_cli_plan_json_has_the_chart():
    out = run("plan", "--p0", "0.04", "--p1", "0.12", "--alpha", "0.05", "--beta", "0.1",
              "--watch-arl0", "1000", "--watch-p1", "0.1", "--json")
    assert out.returncode == 0, out.stderr
    w = json.loads(out.stdout)["watch"]
    assert w == design_watch(0.04, 0.10, 1000, 250).to_dict()
    assert set(w) >= {"m", "t", "h", "arl_p0", "arl_p1", "false_alarm_within"}
    plain = run("plan", "--p0", "0.04", "--p1", "0.12", "--alpha", "0.05", "--beta", "0.1",
                "--json")
    assert json.loads(plain.stdout)["watch"] is None
    text = run("plan", "--p0", "0.04", "--p1", "0.12", "--alpha", "0.05", "--beta", "0.1",
               "--watch-arl0", "1000")
    t_default = design_watch(0.04, 0.12, 1000, 250).t      # --watch-p1 absent: the plan's p1
    assert "Watch after a clear" in text.stdout
    assert f"signal when S >= {t_default} " in text.stdout


@pytest.mark.parametrize("extra, words", [
    (["--watch-arl0", "0.5"], "--watch-arl0"),
    (["--watch-p1", "0.1"], "needs --watch-arl0"),
    (["--watch-arl0", "100", "--watch-p1", "0.01"], "--watch-p1"),
])
def test_cli_watch_errors(extra, words):
    out = run("plan", "--p0", "0.04", "--p1", "0.12", "--alpha", "0.05", "--beta", "0.1", *extra)
    assert out.returncode == 2 and words in out.stderr


def test_workbench_shows_the_chart(ui):
    r = ui.get("/ui/workbench", params={**{k: str(v) for k, v in BASE.items()},
                                        "watch_arl0": "2000"})
    w = design_watch(0.02, 0.08, 2000, 250)
    assert r.status_code == 200 and 'id="watch-figures"' in r.text
    assert f'id="watch-arl-p0">{w.arl_p0:.1f}<' in r.text
    bad = ui.get("/ui/workbench", params={**{k: str(v) for k, v in BASE.items()},
                                          "watch_arl0": "abc"})
    assert "must be numbers" in bad.text


records = st.lists(st.tuples(st.integers(1, 40), st.integers(0, 40)).map(
    lambda t: (t[0], min(t[0], t[1]))), max_size=30)


@hsettings(max_examples=300, deadline=None)
@given(m=st.integers(2, 30), t=st.integers(1, 120), recs=records)
def test_closed_form_update_equals_unit_by_unit_chart(m, t, recs):
    chart, a, b = Chart(m, t), WatchState(), WatchState()
    for units, bad in recs:
        a, sa = apply_units(chart, a, units, bad)
        b, sb = apply_units_stepwise(chart, b, units, bad)
        assert a == b and sa == sb
        if sa is not None:
            break


@hsettings(max_examples=200, deadline=None)
@given(m=st.integers(2, 30), t=st.integers(1, 120), recs=records)
def test_online_chart_equals_replay(m, t, recs):
    # online: one record at a time, state kept between them (as the service does);
    # replay: the fold over the same records from scratch.
    chart, state, path, signal = Chart(m, t), WatchState(), [], None
    for units, bad in recs:
        state, signal = apply_units(chart, state, units, bad)
        path.append(state.value)
        if signal is not None:
            break
    assert replay(chart, recs) == (state, path, signal)


def test_single_unit_records_follow_the_definition():
    # By the chart's definition S' = max(0, S + m X - 1) (Reynolds & Stoumbos 1999).
    chart, state, s = Chart(5, 9), WatchState(), 0
    for x in (1, 0, 1, 0, 0, 0, 0, 0, 0, 1, 1):
        state, signal = apply_units(chart, state, 1, x)
        s = step(s, 5, bool(x))
        assert state.value == s
        if s >= 9:
            assert signal == (s, state.units)
            break
    assert state.value >= 9


def test_nonconforming_first_signals_when_any_order_would():
    # 3 units with 2 nonconforming from S = 0, m = 5, t = 8: nonconforming first reaches 8;
    # the order (bad, good, bad) reaches only 4 - 1 + 4 = 7.
    _, sig = apply_units(Chart(5, 8), WatchState(), 3, 2)
    assert sig is not None and sig.value == 8


def test_plans_command_shows_the_configured_charts():
    out = run("plans", "--json")
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    # config/seqaudit.toml: dispensers arl0 2000 over 400 audits, scales arl0 2000
    assert d["dispensers"]["watch"] == design_watch(0.02, 0.08, 2000, 400).to_dict()
    assert d["scales"]["watch"] == design_watch(0.04, 0.12, 2000, 250).to_dict()
    assert d["scales_capped"]["watch"] is None
    text = run("plans").stdout
    assert text.count("Watch after a clear") == 2
