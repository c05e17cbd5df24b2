"""The alert list in a real browser (Playwright on Debian's Chromium, real uvicorn): the review
queue, filters kept after acknowledging, acknowledging the selected alerts with one note, and
flagged vs cleared told apart in words and colour. Screenshots go to artifacts/browser/."""
import re

import pytest

from service.schemas import FacilityCreate

from .browser import BROWSER, acknowledge_first, open_as, seeded, serve, shot
from .conftest import record

pytestmark = BROWSER


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    seed = seeded(tmp_path_factory, "alerts-ui")
    m, actor = seed.monitor, seed.actor
    batch = []
    for i in range(4):                       # four flagged (three nonconforming in a row)
        m.register_facility(FacilityCreate(facility_id=f"FL-{i}", name=f"Flagged {i}",
                                           plan="dispensers"), actor)
        batch += [record(f"FL-{i}", f"fl-{i}-{k}", 1) for k in range(3)]
    for i in range(3):                       # three cleared (60 conforming, capped plan)
        m.register_facility(FacilityCreate(facility_id=f"CL-{i}", name=f"Cleared {i}",
                                           plan="scales_capped"), actor)
        batch += [record(f"CL-{i}", f"cl-{i}-{k}", 0) for k in range(60)]
    m.register_facility(FacilityCreate(facility_id="WA-0", name="Watched 0", plan="dispensers"),
                        actor)                # cleared at 36 conforming, then watched
    batch += [record("WA-0", f"wa-{k}", 0) for k in range(36)]
    batch += [record("WA-0", "wa-bad", 1, units=2)]          # chart 0 -> 22 -> 21
    m.post_records({"records": batch}, actor, with_state=False)
    with serve(seed) as server:
        yield server, seed.keys


def _rows(pg):
    return pg.eval_on_selector_all("#alerts tbody tr[data-alert]",
                                   "rows => rows.map(r => r.dataset.alert)")


def test_review_queue_filters_kept_and_bulk_acknowledge(page, site):
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst)
    assert pg.inner_text("#open-alerts") == "4"                  # only the flags to review
    pg.goto(server.url + "/ui/alerts")
    assert len(_rows(pg)) == 4
    assert pg.locator("#alerts .kind.k-cleared").count() == 0    # clears are not in the queue
    assert "4 open notices for information only" in pg.inner_text("#informational")
    shot(pg, "20-alerts-review-queue")

    pg.select_option("select[name=kind]", "flagged")             # autosubmits
    pg.wait_for_url(re.compile(r"kind=flagged"))
    first_id = acknowledge_first(pg, "agency phoned")
    # the filter survived the action (the message no longer overwrites `kind`)
    assert pg.eval_on_selector("select[name=kind]", "s => s.value") == "flagged"
    assert pg.eval_on_selector("select[name=review]", "s => s.value") == "needed"
    left = _rows(pg)
    assert len(left) == 3 and first_id not in left

    for alert_id in left[:2]:
        pg.check(f"input[name=alert_id][value='{alert_id}']")
    pg.fill("#bulk-note", "visited both agencies on 2 December")
    pg.click("#bulk-ack-button")
    pg.wait_for_selector(".flash.ok")
    assert "2 alerts acknowledged" in pg.inner_text(".flash.ok")
    assert pg.eval_on_selector("select[name=kind]", "s => s.value") == "flagged"
    assert _rows(pg) == left[2:]
    shot(pg, "21-alerts-after-bulk-acknowledge")

    pg.select_option("select[name=state]", "acknowledged")
    pg.wait_for_url(re.compile(r"state=acknowledged"))
    text = pg.inner_text("#alerts")
    assert text.count("visited both agencies on 2 December") == 2

    pg.goto(server.url + "/ui/alerts?state=all&review=all")
    flagged = pg.locator("#alerts .kind.k-flagged").first
    cleared = pg.locator("#alerts .kind.k-cleared").first
    assert flagged.inner_text() == "Flagged" and cleared.inner_text() == "Cleared"
    colour = "e => getComputedStyle(e).backgroundColor + ' ' + getComputedStyle(e).color"
    assert flagged.evaluate(colour) != cleared.evaluate(colour)
    shot(pg, "22-alerts-all")


def test_watched_facility_page_and_a_finding(page, site):
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst, "/ui/facilities/WA-0")
    assert "Watching (cleared)" in pg.inner_text("h1")
    assert "stands at 21 of the limit 62" in pg.inner_text("#watch-state")
    assert pg.locator("#watch svg.chart").count() == 1
    assert "1 record kept (2 units, 1 nonconforming)" in pg.inner_text("#after-summary")
    pg.select_option("#finding-outcome", "no_action")
    pg.fill("#finding-note", "the agency replaced a worn nozzle")
    pg.click("#finding-add")
    pg.wait_for_selector(".flash.ok")
    assert "Finding recorded on cycle 1" in pg.inner_text(".flash.ok")
    assert "No action needed: the agency replaced a worn nozzle" in pg.inner_text("#finding-list")
    assert "test analyst" in pg.inner_text("#finding-list")
    shot(pg, "23-facility-watching-finding")
