"""Large records and long cycles: a ceiling on units per record, records paged, the case file of
a cycle decided by one big record in little memory, and a short PDF for a cycle with many
records after its decision."""
import re
import shutil
import subprocess
import tracemalloc

import numpy as np
import pytest
from scipy.stats import binom

from service.casefile import build_casefile
from service.casefile.pdf import render_pdf
from service.plans import ConfigError
from service.settings import load_settings
from service.stats import SprtPlan
from service.store import RecordIn

from .conftest import new_facility, record

NOW = "2026-11-30T10:00:00.000000Z"


def test_units_above_the_ceiling_are_refused_with_422(client, keys):
    fid = new_facility(client, keys)
    r = client.post("/v1/records", json=record(fid, "big-1", 0, units=10_001),
                    headers=keys.header("field"))
    assert r.status_code == 422
    assert r.json()["errors"][0]["field"] == "units"
    assert "at most 10000" in r.json()["detail"]
    r = client.post("/v1/records", json=record(fid, "big-2", 0, units=10_000),
                    headers=keys.header("field"))
    assert r.status_code == 201


def test_the_ceiling_is_a_setting(tmp_path):
    from fastapi.testclient import TestClient

    from service.api import create_app

    from .conftest import make_keys, quiet_settings
    app = create_app(quiet_settings(tmp_path).with_overrides(max_record_units=50))
    with TestClient(app) as c:
        keys = make_keys(app.state.monitor.store)
        fid = new_facility(c, keys)
        r = c.post("/v1/records", json={"records": [record(fid, "a", 0, units=50),
                                                    record(fid, "b", 0, units=51)]},
                   headers=keys.header("field"))
        assert [x["code"] for x in r.json()["results"]] == [201, 422]
    env = {"SEQAUDIT_MAX_RECORD_UNITS": "200"}
    assert load_settings(environ=env).max_record_units == 200
    with pytest.raises(ConfigError, match="at most 100000"):
        load_settings(environ={"SEQAUDIT_MAX_RECORD_UNITS": "100001"})


def store_records(store, fid, n, prefix, nonconforming=lambda i: 0, units=1):
    for start in range(0, n, 1000):
        store.ingest([RecordIn(f"{prefix}-{i}", fid, "2026-11-30T09:15:00Z",
                               "2026-11-30T09:15:00.000000Z", units, nonconforming(i))
                      for i in range(start, min(n, start + 1000))], "tablet", NOW)


def test_records_are_paged_with_the_llr_after_each(app, client, keys):
    fid = new_facility(client, keys)
    store = app.state.monitor.store
    # 250 unit records, two of them nonconforming: the dispensers plan clears after some
    # dozens of units; the records after that are kept but are not evidence
    store_records(store, fid, 250, "p", nonconforming=lambda i: int(i in (0, 9)))
    hdr = keys.header("analyst")
    whole = []
    for offset in (0, 100, 200):
        page = client.get(f"/v1/facilities/{fid}/records",
                          params={"limit": 100, "offset": offset}, headers=hdr).json()
        assert page["total"] == 250 and page["limit"] == 100 and page["offset"] == offset
        whole += page["items"]
    assert [r["record_id"] for r in whole] == [f"p-{i}" for i in range(250)]
    # LLR after each evidence record, recomputed from the counts (Wald's LLR, sprt.py)
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10)
    n = d = 0
    for r in whole:
        if r["evidence"]:
            n, d = n + r["units"], d + r["nonconforming"]
            assert r["llr_after"] == pytest.approx(plan.llr(n, d), abs=1e-12)
        else:
            assert r["llr_after"] is None
    assert any(not r["evidence"] for r in whole)       # records after the decision exist
    r = client.get(f"/v1/facilities/{fid}/records", params={"limit": 10_001}, headers=hdr)
    assert r.status_code == 422


def peak_of(fn):
    tracemalloc.start()
    try:
        out = fn()
        return out, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_case_file_of_one_10000_unit_record_in_little_memory(app, client, keys):
    # Before: the exact inference built a 10,001 x 10,001 grid of doubles (800 MB, about
    # 4.9 GB of server memory with temporaries). Now a few arrays of 10,001 doubles.
    fid = new_facility(client, keys)
    r = client.post("/v1/records", json=record(fid, "one-big", 1000, units=10_000),
                    headers=keys.header("field"))
    assert r.status_code == 201
    store = app.state.monitor.store
    cf, peak = peak_of(lambda: build_casefile(store, fid, 1))
    assert cf["decision"] == "flagged" and cf["decided_after_units"] == 10_000
    assert peak < 50_000_000, peak
    # decided by its first record: the p-value is the binomial upper tail at p0
    # (scipy.stats.binom), P(D >= 1000 | n = 10,000, p = 0.02)
    assert cf["p_value"] == pytest.approx(binom.sf(999, 10_000, 0.02), rel=1e-9, abs=1e-300)
    # and the interval is then Clopper-Pearson (beta quantiles, Clopper and Pearson 1934)
    from scipy.stats import beta as beta_dist
    assert cf["ci_low"] == pytest.approx(beta_dist.ppf(0.025, 1000, 9001), abs=1e-8)
    assert cf["ci_high"] == pytest.approx(beta_dist.ppf(0.975, 1001, 9000), abs=1e-8)


@pytest.mark.skipif(shutil.which("pdfinfo") is None, reason="poppler-utils not installed")
def test_pdf_summarises_records_after_the_decision(app, client, keys, tmp_path):
    fid = new_facility(client, keys)
    store = app.state.monitor.store
    store_records(store, fid, 3, "flag", nonconforming=lambda i: 1)      # flagged at once
    store_records(store, fid, 20_000, "after")
    cf = build_casefile(store, fid, 1)
    assert len(cf["records"]) == 20_003                   # the JSON lists every record
    out = tmp_path / "cf.pdf"
    out.write_bytes(render_pdf(cf))
    info = subprocess.run(["pdfinfo", str(out)], capture_output=True, text=True).stdout
    pages = int(re.search(r"Pages:\s+(\d+)", info).group(1))
    assert pages <= 6, pages                              # not 20,000 table rows
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True).stdout
    flat = " ".join(text.split())
    assert "20000 more record(s)" in flat and "not evidence" in flat
    assert np.all([f"flag-{i}" in flat for i in range(3)])
