"""`seqaudit plan` as a user runs it: a real subprocess of the installed command."""
import json
import os
import shutil
import subprocess
import sys

import pytest


def run(*args, env=None):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120,
                          env=None if env is None else {**os.environ, **env})


def test_json_reference_plan():
    out = run("plan", "--p0", "0.01", "--p1", "0.10", "--alpha", "0.05", "--beta", "0.10",
              "--json")
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    # exact alpha' 0.02205, beta' 0.09958, ASN 30.21 / 22.37 (checked against
    # enumeration and simulation in test_exact_engine.py)
    assert abs(d["exact"]["alpha"] - 0.02205) < 1e-5
    assert abs(d["exact"]["beta"] - 0.09958) < 1e-5
    assert round(d["exact"]["asn_p0"], 2) == 30.21
    assert round(d["exact"]["asn_p1"], 2) == 22.37
    assert d["plan"] == {"p0": 0.01, "p1": 0.1, "alpha": 0.05, "beta": 0.1,
                         "max_units": None, "cut_llr": 0.0, "calibrated": False,
                         "visit_units": 1, "sensitivity": 1.0, "specificity": 1.0}
    assert len(d["curve"]) >= 41


def test_text_report_has_the_sections(tmp_path):
    chart = tmp_path / "oc.png"
    out = run("plan", "--p0", "0.02", "--p1", "0.08", "--alpha", "0.05", "--beta", "0.10",
              "--max-units", "300", "--plot", str(chart))
    assert out.returncode == 0, out.stderr
    text = out.stdout
    for phrase in ("Boundaries", "alpha (flag at p0)", "Wald approx.", "units expected at p0",
                   "Fixed-sample test", "suggested cap", "Decision numbers",
                   "not a verdict", "selected at random", "independent", "stable"):
        assert phrase in text, phrase
    assert chart.stat().st_size > 10_000
    assert chart.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("suffix, magic", [(".svg", b"<?xml"), (".pdf", b"%PDF")])
def test_plot_formats(tmp_path, suffix, magic):
    chart = tmp_path / f"curves{suffix}"
    out = run("plan", "--p0", "0.04", "--p1", "0.12", "--alpha", "0.05", "--beta", "0.10",
              "--json", "--plot", str(chart))
    assert out.returncode == 0, out.stderr
    json.loads(out.stdout)
    assert chart.read_bytes().startswith(magic)


@pytest.mark.parametrize("args, names", [
    (["--p0", "0.2", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1"], "--p1"),
    (["--p0", "0", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1"], "--p0"),
    (["--p0", "0.01", "--p1", "1.5", "--alpha", "0.05", "--beta", "0.1"], "--p1"),
    (["--p0", "0.01", "--p1", "0.1", "--alpha", "0.6", "--beta", "0.5"], "--beta"),
    (["--p0", "0.01", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1", "--max-units", "0"],
     "--max-units"),
    (["--p0", "0.01", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1", "--bogus"], "--bogus"),
    (["--p0", "abc", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1"], "--p0"),
    (["--p0", "0.01", "--p1", "0.1", "--alpha", "0.05"], "--beta"),
    (["--p0", "0.01", "--p1", "0.1", "--alpha", "0.05", "--beta", "0.1", "--plot", "x.gif"],
     "--plot"),
])
def test_bad_input_exits_2_with_one_line(args, names):
    out = run("plan", *args)
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1, out.stderr
    assert names in lines[0]
    assert out.stdout == ""


def test_plans_command_prints_demo_plans():
    out = run("plans")
    assert out.returncode == 0, out.stderr
    assert "Plan 'dispensers'" in out.stdout and "Plan 'scales_capped'" in out.stdout


def test_plans_command_reads_the_configuration_the_environment_names(tmp_path):
    solo = tmp_path / "solo.toml"
    solo.write_text("[plans.solo]\np0 = 0.02\np1 = 0.08\nalpha = 0.05\nbeta = 0.1\n")
    out = run("plans", env={"SEQAUDIT_CONFIG": str(solo)})
    assert out.returncode == 0, out.stderr
    assert "Plan 'solo'" in out.stdout and "Plan 'dispensers'" not in out.stdout
    # --config still wins over the environment
    other = tmp_path / "other.toml"
    other.write_text("[plans.other]\np0 = 0.02\np1 = 0.08\nalpha = 0.05\nbeta = 0.1\n")
    out = run("plans", "--config", str(other), env={"SEQAUDIT_CONFIG": str(solo)})
    assert out.returncode == 0, out.stderr
    assert "Plan 'other'" in out.stdout and "Plan 'solo'" not in out.stdout
