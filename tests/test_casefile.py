"""Case files: JSON against its model, PDF opened and read back, CLI."""
import io
import shutil
import subprocess

import pypdf
import pytest

from service.schemas import CaseFilePublic
from service.stats import SprtPlan
from service.stats.inference import infer

from .conftest import new_facility, record
from .test_cli_service import run

HOSTILE_NOTE = "<b>bold</b> & <script>alert(1)</script> '; DROP TABLE records; --"


def flagged_cycle(client, keys):
    fid = new_facility(client, keys)
    outcomes = [0] * 10 + [1] + [0] * 5 + [1] + [0] * 3 + [1, 1]
    for i, x in enumerate(outcomes):
        client.post("/v1/records", json=record(fid, f"{fid}-{i}", x, inspector="S. Moreau",
                                               note=HOSTILE_NOTE if i == 3 else None),
                    headers=keys.header("field"))
    client.post(f"/v1/records/{fid}-4/void", json={"reason": "unit was never certified"},
                headers=keys.header("analyst"))
    client.post("/v1/records", json=record(fid, f"{fid}-late", 0), headers=keys.header("field"))
    return fid


def test_json_casefile_validates_and_matches_the_inference(client, keys):
    fid = flagged_cycle(client, keys)
    r = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json", headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    cf = CaseFilePublic.model_validate(r.json())
    assert cf.decision == "flagged"
    evidence = [x for x in cf.records if x.evidence]
    assert [x.seq for x in cf.records] == sorted(x.seq for x in cf.records)
    assert cf.decided_after_units == sum(x.units for x in evidence)
    expect = infer(SprtPlan.wald(0.02, 0.08, 0.05, 0.10), [x.units for x in evidence],
                   [x.nonconforming for x in evidence])
    assert cf.p_value == pytest.approx(expect.p_value)
    assert cf.ci_low == pytest.approx(expect.ci_low) and cf.ci_level == 0.95
    assert any(x.void and x.void_reason == "unit was never certified" for x in cf.records)
    assert [x.evidence for x in cf.records][-1] is False        # post-decision record kept
    assert {a.action for a in cf.actions} >= {"facility_registered", "record_voided"}
    assert "not a verdict" in cf.caution and len(cf.assumptions) == 3
    assert cf.records[3].note == HOSTILE_NOTE                    # stored literally
    r99 = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json", params={"ci_level": 0.99},
                     headers=keys.header("analyst")).json()
    assert r99["ci_low"] < cf.ci_low


def test_pdf_casefile_opens_and_holds_id_decision_and_cautions(client, keys, tmp_path):
    fid = flagged_cycle(client, keys)
    r = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.pdf", headers=keys.header("analyst"))
    assert r.status_code == 200 and r.headers["content-type"] == "application/pdf"
    assert f"casefile-{fid}-cycle1.pdf" in r.headers["content-disposition"]
    reader = pypdf.PdfReader(io.BytesIO(r.content))
    assert len(reader.pages) >= 4
    text = " ".join(" ".join(page.extract_text().split()) for page in reader.pages)
    assert fid in text and "FLAGGED" in text
    assert "not a verdict" in text and "selected at random" in text
    assert "did not check" in text and "naive d/n (biased)" in text
    assert "<b>bold</b>" in text                                 # rendered inert, as text
    if shutil.which("pdftoppm"):
        pdf = tmp_path / "cf.pdf"
        pdf.write_bytes(r.content)
        subprocess.run(["pdftoppm", "-r", "40", "-png", str(pdf), str(tmp_path / "page")],
                       check=True, timeout=60)
        assert len(list(tmp_path.glob("page*.png"))) == len(reader.pages)


def test_casefile_errors(client, keys):
    fid = new_facility(client, keys)
    hdr = keys.header("analyst")
    r = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json", headers=hdr)
    assert r.status_code == 409 and r.headers["content-type"].startswith("application/problem")
    assert client.get(f"/v1/facilities/{fid}/cycles/2/casefile.json",
                      headers=hdr).status_code == 404
    assert client.get("/v1/facilities/NOPE/cycles/1/casefile.pdf", headers=hdr).status_code == 404
    assert client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                      params={"ci_level": 1.5}, headers=hdr).status_code == 422
    assert client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                      headers=keys.header("field")).status_code == 403


def test_capped_plan_casefile(client, keys):
    fid = new_facility(client, keys, plan="scales_capped")
    outcomes = [1 if i % 15 == 7 else 0 for i in range(150)]
    client.post("/v1/records", json={"records": [record(fid, f"{fid}-{i}", x)
                                                 for i, x in enumerate(outcomes)]},
                headers=keys.header("field"))
    cf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                    headers=keys.header("analyst")).json()
    assert cf["decided_at_cap"] is True and cf["decision"] == "cleared"
    assert cf["ci_low"] <= cf["estimate_median_unbiased"] <= cf["ci_high"]
    assert "max_units" in cf["plan_explained"]


def test_cli_casefile(tmp_path, app, client, keys):
    fid = flagged_cycle(client, keys)
    db = app.state.settings.db_path
    out = run("casefile", fid, "--cycle", "1", "--db", str(db), "--out", str(tmp_path / "c.json"))
    assert out.returncode == 0, out.stderr
    CaseFilePublic.model_validate_json((tmp_path / "c.json").read_text())
    out = run("casefile", fid, "--db", str(db), "--out", str(tmp_path / "c.pdf"))
    assert out.returncode == 0 and (tmp_path / "c.pdf").read_bytes().startswith(b"%PDF")
    bad = run("casefile", fid, "--db", str(db), "--out", str(tmp_path / "c.txt"))
    assert bad.returncode == 2 and "--out" in bad.stderr
