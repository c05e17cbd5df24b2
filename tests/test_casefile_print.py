"""The printed case file: page k of n, facility, cycle and document id on every page, the
software version, unit refs, times to the second, exact figures in words, the estimate and
its interval on the curves, and a sign-off block with blank lines."""
import hashlib
import io
import json
import re
from importlib.metadata import version

import pypdf

from service.charts import curves_figure
from service.stats import design

from .conftest import new_facility, record


def decided(client, keys):
    fid = new_facility(client, keys)           # plan 'dispensers': p0 .02 p1 .08 a .05 b .10
    outcomes = [0] * 8 + [1] + [0] * 4 + [1, 1, 1]
    client.post("/v1/records", json={"records": [
        record(fid, f"{fid}-{i}", x, unit_ref=f"FD-{4000 + i}", inspector="R. Lindqvist",
               observed_at=f"2026-11-30T09:{i:02d}:07.123456+01:00")
        for i, x in enumerate(outcomes)]}, headers=keys.header("field"))
    return fid


def recompute_id(casefile: dict) -> str:
    """The documented recipe (service/casefile/docid.py), done here from the JSON answer."""
    body = {k: v for k, v in casefile.items() if k not in ("document_id", "generated_at")}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def test_document_id_is_the_sha256_of_the_canonical_json_and_is_printed_on_every_page(
        client, keys, app):
    fid = decided(client, keys)
    hdr = keys.header("analyst")
    url = f"/v1/facilities/{fid}/cycles/1/casefile"
    first = client.get(url + ".json", headers=hdr).json()
    assert client.get(url + ".json", headers=hdr).json() == first     # kept: served again
    app.state.heavy.forget()                       # made anew: another time, the same id
    again = client.get(url + ".json", headers=hdr).json()
    assert first["document_id"] == recompute_id(first)
    assert re.fullmatch(r"[0-9a-f]{64}", first["document_id"])
    assert again["generated_at"] != first["generated_at"]
    assert again["document_id"] == first["document_id"]      # same content, same id
    assert first["software_version"] == version("seqaudit")
    # another confidence level is another document
    other = client.get(url + ".json", params={"ci_level": 0.9}, headers=hdr).json()
    assert other["document_id"] != first["document_id"]
    pdf = pypdf.PdfReader(io.BytesIO(client.get(url + ".pdf", headers=hdr).content))
    pages = [" ".join(p.extract_text().split()) for p in pdf.pages]
    n = len(pages)
    assert n >= 4
    for k, text in enumerate(pages, start=1):
        assert f"page {k} of {n}" in text
        assert f"Case file {fid}, cycle 1" in text
        assert first["document_id"] in text
        assert f"seqaudit {version('seqaudit')}" in text


def test_printed_contents(client, keys):
    fid = decided(client, keys)
    hdr = keys.header("analyst")
    cf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json", headers=hdr).json()
    pdf = pypdf.PdfReader(io.BytesIO(client.get(
        f"/v1/facilities/{fid}/cycles/1/casefile.pdf", headers=hdr).content))
    text = " ".join(" ".join(p.extract_text().split()) for p in pdf.pages)
    assert "FD-4000" in text and "FD-4014" in text                # unit_ref in the table
    # the 16th record came after the decision: summarised, not listed (the JSON lists it)
    assert "FD-4015" not in text and "After the decision 1 more record(s) arrived" in text
    assert not re.search(r"\d{2}:\d{2}:\d{2}\.\d", text)          # times to the second
    assert "2026-11-30 09:03:07+01:00" in text                    # as sent, less the fraction
    # exact figures in words: the engine's exact alpha' and beta' of this plan, not "about"
    exact = design(0.02, 0.08, 0.05, 0.10).to_dict()["exact"]
    words = cf["plan_explained"]
    assert f"exactly {100 * exact['alpha']:.4g} %" in words["alpha"]
    assert f"exactly {100 * exact['beta']:.4g} %" in words["beta"]
    assert "about" not in words["alpha"] + words["beta"]
    assert f"exactly {100 * exact['beta']:.4g} %" in text
    # the sign-off block, blank before review
    assert "Findings and sign-off" in text and "reviewer" in text and "signature" in text
    assert "_" * 20 in text
    assert (f"interval {cf['ci_low']:.4f} to {cf['ci_high']:.4f}") in text


def test_curves_show_p0_p1_estimate_and_interval_within_the_axes():
    curve = design(0.02, 0.08, 0.05, 0.10).to_dict()["curve"]      # rates 0 .. 2 p1 = 0.16
    fig = curves_figure(curve, 0.02, 0.08, 0.21, "estimate", interval=(0.09, 0.31, 0.95))
    try:
        for ax in fig.axes:
            low, high = ax.get_xlim()
            assert low <= 0.02 and high >= 0.31                    # p0 .. the interval's end
            labels = ax.get_legend_handles_labels()[1]
            assert "estimate" in labels and "95 % interval" in labels
            names = [t.get_text() for t in ax.texts]
            assert "p0" in names and "p1" in names
    finally:
        import matplotlib.pyplot as plt
        plt.close(fig)
