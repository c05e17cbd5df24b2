"""The inspectors' field app (/field) in a real browser: Playwright driving Debian's headless
Chromium against a real uvicorn process, with the network going and coming.

What must hold (issue: offline-first re-check entry): a re-check saved on the tablet reaches
the database exactly once, whatever the network does; a refused one stays in the outbox with
its reason; the app opens with no network once it has been loaded. Screenshots of each screen
go to artifacts/browser/field-*.png.
"""
import re
import sqlite3
import time
from pathlib import Path

import httpx2
import pytest

from .browser import BROWSER, new_page, seeded, serve
from .browser import shot as _shot

pytestmark = BROWSER
WIDTH = 768          # the tablet width the app must work at


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    """A live server with two facilities, each with a registered frame and a draw of 8 units."""
    seed = seeded(tmp_path_factory, "field")
    with serve(seed) as server:
        yield server, seed.keys, _seed(server, seed.keys), seed.db


def _seed(server, keys) -> dict[str, list[str]]:
    analyst, admin = keys.header("analyst"), keys.header("admin")
    drawn = {}
    with httpx2.Client(base_url=server.url, timeout=30) as http:
        for fid, prefix in (("SA-FLD-1", "PUMP"), ("SA-FLD-2", "SCALE")):
            r = http.post("/v1/facilities", json={"facility_id": fid, "name": f"Agency {fid}",
                                                  "plan": "dispensers"}, headers=admin)
            assert r.status_code == 201, r.text
            units = [f"{prefix}-{i:03d}" for i in range(1, 41)]
            r = http.post(f"/v1/facilities/{fid}/frames", headers=analyst,
                          json={"label": "week 48", "period_start": "2026-11-23",
                                "period_end": "2026-11-29", "units": units})
            assert r.status_code == 201, r.text
            r = http.post(f"/v1/facilities/{fid}/draws", headers=analyst,
                          json={"frame_id": r.json()["frame_id"], "size": 8,
                                "seed": "14 3 27 9 / 30 11 2026"})
            assert r.status_code == 201, r.text
            drawn[fid] = [u["unit_ref"] for u in r.json()["units"]]
    return drawn


def shot(pg, name):
    _shot(pg, f"field-{name}")


@pytest.fixture
def tablet(browser, site):
    """A page at the tablet width in a context of its own."""
    with new_page(browser, width=WIDTH, height=1000) as pg:
        yield pg


def stored(db: Path, unit_refs: list[str]) -> dict[str, int]:
    """unit_ref -> number of stored records carrying it (read straight from the file)."""
    with sqlite3.connect(db) as conn:
        marks = ",".join("?" * len(unit_refs))
        rows = conn.execute(f"SELECT unit_ref, COUNT(*) FROM records WHERE unit_ref IN ({marks}) "
                            "GROUP BY unit_ref", unit_refs).fetchall()
    return {u: n for u, n in rows}


def sign_in(pg, server, key):
    pg.goto(server.url + "/field")
    pg.get_by_label("Field key", exact=True).fill(key)
    pg.get_by_role("button", name="Sign in").click()
    pg.get_by_role("heading", name="To do").wait_for()


def enter(pg, facility, unit, bad=False, note=None):
    pg.get_by_label("Facility", exact=True).fill(facility)
    pg.get_by_label("Unit", exact=True).fill(unit)
    pg.get_by_role("button", name="Nonconforming" if bad else "Conforming", exact=True).click()
    if note:
        pg.get_by_label("Note", exact=True).fill(note)
    pg.get_by_role("button", name="Save").click()
    pg.get_by_text(f"Saved {unit} at {facility}").wait_for()


def outbox_text(pg) -> str:
    return pg.locator("#outbox-status").inner_text()


def wait_outbox_empty(pg, timeout_s=60):
    try:
        pg.get_by_text("Empty: every saved re-check has reached the service.").wait_for(
            timeout=timeout_s * 1000)
    except Exception:
        shot(pg, "failed-wait")
        raise AssertionError(f"outbox not emptied: {pg.locator('#outbox').inner_text()!r} "
                             f"{outbox_text(pg)!r}")


def wait_worker(pg):
    """Until the service worker controls the page (the shell is cached from then on)."""
    pg.wait_for_function("navigator.serviceWorker.controller !== null", timeout=30_000)


UUID7 = re.compile(r"[0-9a-f]{8}-[0-9a-f]{4}-7[0-9a-f]{3}-[89ab][0-9a-f]{3}-[0-9a-f]{12}")


def test_online_entries_are_stored_and_leave_the_assignments(tablet, site):
    server, keys, drawn, db = site
    pg = tablet
    started_ms = time.time() * 1000
    pg.goto(server.url + "/field")
    pg.get_by_label("Field key", exact=True).wait_for()
    shot(pg, "sign-in")
    pg.get_by_label("Field key", exact=True).fill("sqa_not-a-key")
    pg.get_by_role("button", name="Sign in").click()
    pg.get_by_role("alert").filter(has_text="key").wait_for()
    sign_in(pg, server, keys.field)
    fid = "SA-FLD-1"
    first = drawn[fid][:3]
    # the To do list shows the draw in its order
    todo = pg.locator("#todo .unit").all_inner_texts()
    assert todo[:8] == drawn[fid] or todo[:8] == drawn["SA-FLD-2"]
    shot(pg, "to-do")
    # the first by picking from the list, the others typed; one of them with the keyboard alone
    pg.get_by_role("button", name=f"Re-check {first[0]} at {fid}").click()
    assert pg.get_by_label("Unit", exact=True).input_value() == first[0]
    pg.keyboard.press("Space")                  # focus sits on "Conforming" after picking
    pg.get_by_role("button", name="Save").click()
    pg.get_by_text(f"Saved {first[0]} at {fid}").wait_for()
    enter(pg, fid, first[1], bad=True, note="seal broken")
    pg.get_by_label("Facility", exact=True).focus()
    pg.keyboard.press("Control+a")              # the facility stays filled in after a save
    pg.keyboard.type(fid)
    pg.keyboard.press("Tab")
    pg.keyboard.type(first[2])
    pg.keyboard.press("Tab")                    # Conforming
    pg.keyboard.press("Enter")
    for _ in range(3):                          # Nonconforming, Note, Save
        pg.keyboard.press("Tab")
    pg.keyboard.press("Enter")
    pg.get_by_text(f"Saved {first[2]} at {fid}").wait_for()
    wait_outbox_empty(pg)
    assert stored(db, first) == {u: 1 for u in first}
    # record ids are UUIDs of version 7 (RFC 9562, 5.7): the first 48 bits are the time of the
    # save in milliseconds (this machine's clock, within this test), so later saves sort later
    with sqlite3.connect(db) as conn:
        ids = [r[0] for r in conn.execute("SELECT record_id FROM records WHERE unit_ref IN "
                                          "(?, ?, ?) ORDER BY seq", first)]
    assert len(ids) == 3 and all(UUID7.fullmatch(i) for i in ids), ids
    ms = [int(i.replace("-", "")[:12], 16) for i in ids]
    assert started_ms - 1000 <= ms[0] and ms[-1] <= time.time() * 1000 + 1000, (started_ms, ms)
    assert ms == sorted(ms) and len(set(ids)) == 3
    # the re-checked units have left the tablet's list, the rest stay in draw order
    pg.wait_for_function(f"!document.querySelector('#todo').innerText.includes({first[0]!r})")
    todo = pg.locator("#todo .unit").all_inner_texts()
    assert not set(first) & set(todo)
    assert [u for u in todo if u.startswith("PUMP")] == drawn[fid][3:]
    # nothing about the facility's standing is shown
    body = pg.locator("body").inner_text().lower()
    assert "llr" not in body and "flagged" not in body and "cleared" not in body
    shot(pg, "after-sending")


def test_offline_entries_survive_reload_and_restart_and_land_once(tablet, site):
    server, keys, drawn, db = site
    pg = tablet
    sign_in(pg, server, keys.field)
    wait_worker(pg)
    pg.context.set_offline(True)
    pg.reload()                                 # served by the service worker's cache
    pg.get_by_role("heading", name="Re-check entry").wait_for()
    assert "Offline" in pg.locator("#net").inner_text()
    fid = "SA-FLD-2"
    units = drawn[fid][:5]
    for i, unit in enumerate(units):
        enter(pg, fid, unit, bad=(i == 2))
    pg.get_by_role("button", name="Send now").click()
    pg.wait_for_function("document.querySelector('#outbox-status').innerText.startsWith('5 waiting')")
    shot(pg, "outbox-offline")
    assert stored(db, units) == {}
    # the server goes down and comes back while the tablet is still offline
    server.stop()
    server.start()
    assert stored(db, units) == {}
    pg.context.set_offline(False)
    wait_outbox_empty(pg)
    assert stored(db, units) == {u: 1 for u in units}


def test_flaky_network_neither_doubles_nor_loses(browser, site):
    """Every other POST is committed by the server and then its answer is dropped."""
    server, keys, drawn, db = site
    # the service worker is blocked here: request interception cannot see requests that
    # pass through one, and this test is about the sender, not the cache
    with new_page(browser, width=WIDTH, height=1000, service_workers="block") as pg:
        posts = {"n": 0, "dropped": 0}

        def drop_every_other(route):
            posts["n"] += 1
            if posts["n"] % 2 == 1:
                route.fetch()                       # reaches the server, which commits
                posts["dropped"] += 1
                route.abort("connectionreset")      # ... but the tablet never hears back
            else:
                route.continue_()

        sign_in(pg, server, keys.field)
        pg.route("**/v1/records", drop_every_other)
        units = [f"PUMP-FLAKY-{i}" for i in range(6)]
        for unit in units:
            enter(pg, "SA-FLD-1", unit)
        wait_outbox_empty(pg, timeout_s=120)
        assert posts["dropped"] >= 1
        assert stored(db, units) == {u: 1 for u in units}


def test_refused_record_stays_with_its_reason_until_discarded(tablet, site):
    server, keys, drawn, db = site
    pg = tablet
    sign_in(pg, server, keys.field)
    enter(pg, "SA-NO-SUCH", "PUMP-999")
    entry = pg.locator("#outbox li.refused")
    entry.wait_for()
    assert "no facility" in entry.inner_text().lower()
    pg.get_by_role("button", name="Send now").click()
    time.sleep(1.0)                             # a resend must not drop it
    assert pg.locator("#outbox li.refused").count() == 1
    shot(pg, "refused")
    seen = []
    pg.once("dialog", lambda d: (seen.append(d.message), d.dismiss()))
    pg.get_by_role("button", name="Discard PUMP-999 at SA-NO-SUCH").click()
    assert seen and "Discard" in seen[0]
    assert pg.locator("#outbox li.refused").count() == 1        # dismissed: kept
    pg.once("dialog", lambda d: d.accept())
    pg.get_by_role("button", name="Discard PUMP-999 at SA-NO-SUCH").click()
    wait_outbox_empty(pg)
    pg.get_by_role("button", name="Sign out").click()
    pg.get_by_label("Field key", exact=True).wait_for()
    assert pg.evaluate("localStorage.getItem('seqaudit.field.key')") is None


def test_shell_headers_and_manifest(site):
    server, *_ = site
    with httpx2.Client(base_url=server.url, timeout=10) as http:
        page = http.get("/field")
        assert page.status_code == 200
        csp = page.headers["content-security-policy"]
        assert "script-src 'self'" in csp and "connect-src 'self'" in csp
        worker = http.get("/field/sw.js")
        assert worker.headers["service-worker-allowed"] == "/field"
        assert "seqaudit-field-" in worker.text and "__CACHE__" not in worker.text
        manifest = http.get("/field/manifest.webmanifest").json()
        assert manifest["start_url"] == "/field" and manifest["display"] == "standalone"
