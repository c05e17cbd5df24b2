"""`seqaudit frames import` as a user runs it: a real subprocess of the installed command."""
import hashlib
import shutil
import subprocess
import sys

from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store


def run(*args):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def make_db(tmp_path):
    db = tmp_path / "seqaudit.db"
    store = Store(db)
    store.migrate()
    m = Monitor(store=store, plans=PlanBook(load_settings(db_path=db).plans))
    m.register_facility(FacilityCreate(facility_id="SA-7", name="Seven", plan="scales"),
                        ("test", "admin"))
    return db, store


def test_frames_import_prints_the_hash_and_duplicates(tmp_path):
    db, store = make_db(tmp_path)
    f = tmp_path / "week.csv"
    f.write_text("unit_ref,site\nSC-3,N\nSC-1,N\nSC-3,S\n", encoding="utf-8")
    out = run("frames", "import", str(f), "--facility", "SA-7", "--label", "week 48",
              "--period-start", "2026-11-23", "--period-end", "2026-11-29", "--db", str(db))
    assert out.returncode == 0, out.stderr
    sha = hashlib.sha256(b"SC-1\nSC-3\n").hexdigest()       # canonical text by hand
    assert f"2 units, sha256 {sha}" in out.stdout
    assert "duplicates counted once: 1 (SC-3)" in out.stdout
    (frame,) = store.frames("SA-7")
    assert frame["sha256"] == sha and frame["label"] == "week 48"


def test_frames_import_refusals_name_the_argument_and_write_nothing(tmp_path):
    db, store = make_db(tmp_path)
    good = tmp_path / "good.txt"
    good.write_text("A\nB\n", encoding="utf-8")
    bad = tmp_path / "bad.txt"
    bad.write_text("A\nB\x07\n", encoding="utf-8")
    base = ["--label", "w", "--period-start", "2026-11-23", "--period-end", "2026-11-29",
            "--db", str(db)]
    cases = [
        ([str(bad), "--facility", "SA-7", *base], "argument file", "line 2"),
        ([str(good), "--facility", "NOPE", *base], "argument --facility", "NOPE"),
        ([str(tmp_path / "none.txt"), "--facility", "SA-7", *base], "argument file", "none"),
        ([str(good), "--facility", "SA-7", "--label", "w", "--period-start", "2026-02-30",
          "--period-end", "2026-11-29", "--db", str(db)], "argument --period-start", "date"),
    ]
    for args, where, what in cases:
        out = run("frames", "import", *args)
        assert out.returncode == 2, (args, out.stdout, out.stderr)
        assert where in out.stderr and what in out.stderr, out.stderr
    assert store.frames("SA-7") == []
