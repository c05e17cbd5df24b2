"""`seqaudit keys` and the CSV imports, run as a user runs them."""
import csv
import shutil
import subprocess
import sys

from service.store import Store, hash_key


def run(*args, cwd=None):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120, cwd=cwd)


def test_keys_add_prints_only_the_key_and_stores_a_hash(tmp_path):
    db = tmp_path / "k.db"
    out = run("keys", "add", "--db", str(db), "--role", "field", "--label", "tablet 4")
    assert out.returncode == 0, out.stderr
    key = out.stdout.strip()
    assert out.stdout == key + "\n" and key.startswith("sqa_") and len(key) > 40
    # never stored in clear (read the file before opening a connection: closing another
    # descriptor of an open SQLite file would drop that connection's POSIX locks)
    assert key not in db.read_bytes().decode("latin-1")
    store = Store(db)
    assert store.key_by_hash(hash_key(key))["role"] == "field"
    listed = run("keys", "list", "--db", str(db))
    assert "tablet 4" in listed.stdout and key not in listed.stdout
    assert run("keys", "revoke", "--db", str(db), "1").returncode == 0
    assert run("keys", "revoke", "--db", str(db), "1").returncode == 2
    assert store.keys()[0]["revoked_at"] is not None


def test_keys_add_refuses_unknown_role(tmp_path):
    out = run("keys", "add", "--db", str(tmp_path / "k.db"), "--role", "root", "--label", "x")
    assert out.returncode == 2 and "--role" in out.stderr


def write_csv(path, header, rows):
    with path.open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)


def test_imports_load_good_rows_and_report_bad_ones(tmp_path):
    db = tmp_path / "i.db"
    fac = tmp_path / "agencies.csv"
    write_csv(fac, ["facility_id", "name", "plan"], [
        ["SA-201", "Merrow Calibration Works", "dispensers"],
        ["SA-202", "Fennick Instrument Care", "scales"],
        ["SA-201", "Again", "dispensers"],            # duplicate id
        ["SA-203", "No Plan Ltd", "fuel-oil"],        # unknown plan
        ["", "Nameless", "scales"],                   # empty id
    ])
    out = run("facilities", "import", str(fac), "--db", str(db))
    assert out.returncode == 1
    assert "2 of 5 rows stored" in out.stdout
    assert "row 4: facility_id" in out.stderr and "row 5: plan" in out.stderr
    assert "row 6: facility_id" in out.stderr

    recs = tmp_path / "history.csv"
    rows = [[f"h-{i}", "SA-201", "2026-10-01T08:00:00Z", "1", "0", "", "T. Haddad", ""]
            for i in range(40)]
    rows += [["h-bad-1", "SA-201", "2026-10-01", "1", "0", "", "", ""],
             ["h-bad-2", "SA-999", "2026-10-01T08:00:00Z", "1", "0", "", "", ""],
             ["h-bad-3", "SA-202", "2026-10-01T08:00:00Z", "one", "0", "", "", ""],
             ["h-0", "SA-201", "2026-10-01T08:00:00Z", "1", "1", "", "T. Haddad", ""]]
    write_csv(recs, ["record_id", "facility_id", "observed_at", "units", "nonconforming",
                     "unit_ref", "inspector", "note"], rows)
    errors = tmp_path / "rejected.csv"
    out = run("records", "import", str(recs), "--db", str(db), "--errors", str(errors))
    assert out.returncode == 1
    assert "40 of 44 rows stored" in out.stdout
    with errors.open() as fh:
        report = list(csv.DictReader(fh))
    assert [(r["row"], r["field"]) for r in report] == [
        ("42", "observed_at"), ("43", "facility_id"), ("44", "units"), ("45", "record_id")]
    assert "records" in out.stderr  # the progress line
    store = Store(db)
    fac_state = store.facility("SA-201")
    assert fac_state["status"] == "cleared" and fac_state["units"] == 36  # 36 conforming clear
    # importing the same file again counts nothing twice
    again = run("records", "import", str(recs), "--db", str(db))
    assert "40 of 44 rows stored" in again.stdout
    assert store.facility("SA-201")["record_count"] == 40


def test_missing_column_is_a_clear_error(tmp_path):
    bad = tmp_path / "bad.csv"
    write_csv(bad, ["facility_id", "name"], [["SA-1", "x"]])
    out = run("facilities", "import", str(bad), "--db", str(tmp_path / "x.db"))
    assert out.returncode == 2 and "missing column" in out.stderr
