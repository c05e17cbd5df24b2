"""`seqaudit program forecast|visits` and the region column of `facilities import`, run as a
user runs them (real subprocesses over a real SQLite file)."""
import csv
import io
import json

from service.stats.register import conditioned
from service.store import Store, plan_of

from .test_cli_service import run, write_csv


def _seed(tmp_path):
    db = tmp_path / "p.db"
    fac = tmp_path / "agencies.csv"
    write_csv(fac, ["facility_id", "name", "plan", "region"], [
        ["SA-1", "Merrow Calibration Works", "dispensers", "north"],
        ["SA-2", "Fennick Instrument Care", "scales", "south"],
        ["SA-3", "Orrin Scale Service", "scales", ""],
        ["SA-4", "Bad Region Ltd", "scales", "x" * 65],
    ])
    out = run("facilities", "import", str(fac), "--db", str(db))
    assert "3 of 4 rows stored" in out.stdout and "row 5: region" in out.stderr
    recs = tmp_path / "history.csv"
    write_csv(recs, ["record_id", "facility_id", "observed_at", "units", "nonconforming"],
              [["r1", "SA-1", "2026-10-01T08:00:00Z", "30", "1"],
               ["r2", "SA-2", "2026-10-02T08:00:00Z", "12", "1"]])
    assert run("records", "import", str(recs), "--db", str(db)).returncode == 0
    return db


def test_import_region_forecast_and_visits(tmp_path):
    db = _seed(tmp_path)
    store = Store(db)
    assert store.regions() == ["north", "south"]
    out = run("program", "forecast", "--db", str(db), "--json")
    assert out.returncode == 0, out.stderr
    body = json.loads(out.stdout)
    assert body["totals"]["open_cycles"] == 3
    # the per-cycle figure equals the exact engine started at the stored state
    row = next(c for c in body["cycles"] if c["facility_id"] == "SA-1")
    cyc = store.open_cycles("north")[0]
    plan = plan_of(cyc["plan_json"])
    fig = conditioned(plan, [30], [1], [plan.p0, plan.p1])
    assert abs(row["p_flag_p0"] - fig.p_flag[0, 0]) < 1e-12
    text = run("program", "forecast", "--db", str(db), "--budget", "20", "--runs", "50")
    assert text.returncode == 0 and "Weeks to decide at 20 audits a week" in text.stdout
    assert "not a verdict" in text.stdout
    vis = run("program", "visits", "--db", str(db), "--budget", "15", "--format", "csv",
              "--region", "south")
    assert vis.returncode == 0, vis.stderr
    rows = list(csv.DictReader(io.StringIO(vis.stdout)))
    assert [r["facility_id"] for r in rows] == ["SA-2"] and rows[0]["region"] == "south"
    store.close()


def test_program_bad_input(tmp_path):
    db = _seed(tmp_path)
    out = run("program", "visits", "--db", str(db), "--budget", "0")
    assert out.returncode == 2 and "--budget" in out.stderr and "at least 1" in out.stderr
    out = run("program", "forecast", "--db", str(db), "--region", "atlantis")
    assert out.returncode == 2 and "unknown region 'atlantis'" in out.stderr
    assert "north, south" in out.stderr
    out = run("program", "visits", "--db", str(tmp_path / "none.db"), "--budget", "3")
    assert out.returncode == 2 and "does not exist" in out.stderr
