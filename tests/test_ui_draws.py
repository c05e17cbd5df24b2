"""Dashboard: frames and draws on the facility page, CSV frame upload, draw, CSV download."""
import csv
import io
from urllib.parse import quote

from .conftest import new_facility
from .test_api_draws import SEED, by_hand
from .test_ui_pages import ui  # noqa: F401  (fixture)


def test_upload_frame_make_draw_download(ui, client, keys):  # noqa: F811
    fid = new_facility(client, keys)
    refs = [f"SC-{i:04d}" for i in range(50)] + ["SC-0003"]
    upload = "unit_ref\n" + "\n".join(refs) + "\n"
    r = ui.post(f"/ui/facilities/{fid}/frames",
                data={"csrf": ui.csrf, "label": "week 48", "period_start": "2026-11-23",
                      "period_end": "2026-11-29"},
                files={"file": ("frame.csv", upload.encode(), "text/csv")},
                follow_redirects=False)
    assert r.status_code == 303
    assert "registered" in r.headers["location"] and "kind=ok" in r.headers["location"]
    assert "1+duplicate" in r.headers["location"]
    page = ui.get(f"/ui/facilities/{fid}")
    assert "week 48" in page.text
    frame_id = ui.app.state.monitor.store.frames(fid)[0]["frame_id"]
    assert ui.app.state.monitor.store.frames(fid)[0]["duplicates"] == ["SC-0003"]
    r = ui.post(f"/ui/facilities/{fid}/draws", data={"csrf": ui.csrf, "frame_id": frame_id,
                                                     "size": "6", "seed": SEED},
                follow_redirects=False)
    assert r.status_code == 303 and "kind=ok" in r.headers["location"], r.headers["location"]
    page = ui.get(f"/ui/facilities/{fid}")
    _, key, expected = by_hand(refs, "9319./2.5.8.10.12./9.18.26.34.41.45./", 6)
    assert key in page.text
    for u in expected:
        assert u in page.text
    draw_id = ui.app.state.monitor.store.draws(fid)[0]["draw_id"]
    got = ui.get(f"/ui/facilities/{quote(fid, safe='')}/draws/{draw_id}.csv")
    assert got.status_code == 200 and got.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(got.text)))
    assert [row["unit_ref"] for row in rows] == expected
    assert [int(row["order"]) for row in rows] == list(range(1, 7))
    text = ui.get(f"/ui/facilities/{fid}/frames/{frame_id}.txt")
    assert text.text == "".join(u + "\n" for u in sorted(set(refs)))


def test_bad_draw_and_bad_frame_are_reported_on_the_page(ui, client, keys):  # noqa: F811
    fid = new_facility(client, keys)
    r = ui.post(f"/ui/facilities/{fid}/frames",
                data={"csrf": ui.csrf, "label": "w", "period_start": "2026-11-23",
                      "period_end": "2026-11-29"},
                files={"file": ("f.txt", b"A\nB\x01\n", "text/plain")}, follow_redirects=False)
    assert "kind=error" in r.headers["location"] and "line+2" in r.headers["location"]
    r = ui.post(f"/ui/facilities/{fid}/frames",
                data={"csrf": ui.csrf, "label": "w", "period_start": "2026-11-23",
                      "period_end": "2026-11-29"},
                files={"file": ("f.txt", b"A\nB\n", "text/plain")}, follow_redirects=False)
    frame_id = ui.app.state.monitor.store.frames(fid)[0]["frame_id"]
    r = ui.post(f"/ui/facilities/{fid}/draws", data={"csrf": ui.csrf, "frame_id": frame_id,
                                                     "size": "3", "seed": "1"},
                follow_redirects=False)
    assert "kind=error" in r.headers["location"] and "size" in r.headers["location"]
    r = ui.post(f"/ui/facilities/{fid}/draws", data={"csrf": "wrong", "frame_id": frame_id,
                                                     "size": "1", "seed": "1"},
                follow_redirects=False)
    assert r.status_code == 403
    assert ui.app.state.monitor.store.draws(fid) == []
