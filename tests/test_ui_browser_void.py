"""In a real browser: the Void button on a record whose id climbs out of its URL voids that
record and nothing of another facility (the browser normalises '/../' in a path)."""
import pytest

from service.schemas import FacilityCreate
from service.store import RecordIn

from .browser import BROWSER, open_as, seeded, serve, shot
from .conftest import record

pytestmark = BROWSER


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    seed = seeded(tmp_path_factory, "void")
    m, actor = seed.monitor, seed.actor
    for fid in ("VIC-1", "ATT-1"):
        m.register_facility(FacilityCreate(facility_id=fid, name=fid, plan="dispensers"), actor)
    m.post_records({"records": [record("VIC-1", f"vic-{k}", 1) for k in range(3)]}, actor,
                   with_state=False)
    # ids an earlier version accepted from a field key, stored as it stored them
    seed.store.ingest([RecordIn(rid, "ATT-1", "2026-11-30T09:15:00Z",
                                "2026-11-30T09:15:00.000000Z", 1, 0)
                       for rid in ("junk/../vic-2", "..")],
                      "tablet", "2026-11-30T10:00:00.000000Z")
    with serve(seed) as server:
        yield server, seed.keys


def test_void_of_the_attackers_record_leaves_the_other_facility_flagged(page, site):
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst)
    pg.on("dialog", lambda dialog: dialog.accept())   # void asks for confirmation
    pg.goto(server.url + "/ui/facilities/VIC-1")
    assert pg.inner_text("#cycle-status") == "Flagged"
    pg.goto(server.url + "/ui/facilities/ATT-1")
    row = pg.locator("tr[data-record='junk/../vic-2']")
    row.locator("input[name=reason]").fill("not a real record")
    row.locator("button:text('Void')").click()
    pg.wait_for_selector(".flash")
    assert "Record junk/../vic-2 voided" in pg.inner_text(".flash.ok")
    assert pg.url.startswith(server.url + "/ui/facilities/ATT-1")
    assert "void" in pg.get_attribute("tr[data-record='junk/../vic-2']", "class")
    shot(pg, "11-void-attackers-record")
    # the record '..' can be voided from the dashboard as well
    row = pg.locator("tr[data-record='..']")
    row.locator("input[name=reason]").fill("not a real record either")
    row.locator("button:text('Void')").click()
    pg.wait_for_selector(".flash.ok")
    assert "void" in pg.get_attribute("tr[data-record='..']", "class")
    pg.goto(server.url + "/ui/facilities/VIC-1")
    assert pg.inner_text("#cycle-status") == "Flagged"        # untouched
    assert "void" not in (pg.get_attribute("tr[data-record='vic-2']", "class") or "")
    shot(pg, "12-other-facility-still-flagged")
