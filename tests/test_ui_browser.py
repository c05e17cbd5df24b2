"""The dashboard in a real browser: Playwright driving Debian's headless Chromium against a
real uvicorn process (tests/browser.py). Screenshots go to artifacts/browser/."""
import re
from pathlib import Path

import pytest

from service.schemas import FacilityCreate

from .browser import BROWSER, acknowledge_first, open_as, seeded, serve, shot, sign_in
from .conftest import record

pytestmark = BROWSER


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    seed = seeded(tmp_path_factory, "ui")
    m, actor = seed.monitor, seed.actor
    for i in range(40):
        m.register_facility(FacilityCreate(facility_id=f"SA-{300 + i}", name=f"Agency {i}",
                                           plan="dispensers" if i % 2 else "scales"), actor)
    batch = []
    for i in (0, 1, 2):                      # three flagged: three nonconforming in a row
        batch += [record(f"SA-{300 + i}", f"seed-{i}-{k}", 1) for k in range(3)]
    batch += [record("SA-305", f"seed-5-{k}", 0) for k in range(40)]     # one cleared
    batch += [record("SA-306", f"seed-6-{k}", int(k == 3)) for k in range(10)]
    m.post_records({"records": batch}, actor, with_state=False)
    with serve(seed) as server:
        yield server, seed.keys


def test_analyst_workflow(page, site):
    server, keys = site
    pg = page
    sign_in(pg, server, keys.field)                     # field keys are refused
    assert "Field keys can only post records" in pg.inner_text("#signin-error")
    shot(pg, "01-signin-refused")
    open_as(pg, server, keys.analyst)
    assert "SA-300" in pg.inner_text("#facilities")
    assert "not a verdict" in pg.inner_text(".caution")
    shot(pg, "02-overview")
    pg.select_option("select[name=status]", "flagged")  # autosubmits (plain JS)
    pg.wait_for_url(re.compile(r"status=flagged"))
    statuses = pg.eval_on_selector_all("#facilities tbody tr", "rows => rows.map(r => r.dataset.status)")
    assert statuses == ["flagged"] * 3
    shot(pg, "03-overview-flagged")
    pg.click("#facilities a:text('SA-301')")
    pg.wait_for_url(re.compile(r"/ui/facilities/SA-301"))
    assert pg.inner_text("#cycle-status") == "Flagged"
    shot(pg, "04-facility-flagged")
    row = pg.locator("tr[data-record='seed-1-2']")
    row.locator("input[name=reason]").fill("unit belonged to another agency")
    pg.once("dialog", lambda dialog: dialog.accept())   # void asks for confirmation
    row.locator("button:text('Void')").click()
    pg.wait_for_selector(".flash.ok")
    assert "voided" in pg.inner_text(".flash.ok") and "revised" in pg.inner_text(".flash.ok")
    assert pg.inner_text("#cycle-status") == "Monitoring"          # replayed: two left
    assert pg.inner_text("#cycle-nonconforming") == "2"
    assert "void" in pg.get_attribute("tr[data-record='seed-1-2']", "class")
    shot(pg, "05-facility-after-void")
    pg.click("header nav a:text('Alerts')")
    pg.wait_for_url(re.compile(r"/ui/alerts"))
    alert_id = acknowledge_first(pg, "case opened with the agency")
    assert pg.locator(f"#alerts tr[data-alert='{alert_id}']").count() == 0   # left the open list
    shot(pg, "06-alerts")
    pg.click("header nav a:text('Plan workbench')")
    for name, value in (("p0", "0.01"), ("p1", "0.10"), ("alpha", "0.05"), ("beta", "0.10")):
        pg.fill(f"input[name={name}]", value)
    pg.click("#compute")
    pg.wait_for_selector("#exact-alpha")
    # exact alpha' of this plan is 0.02205 (checked against enumeration in test_exact_engine)
    assert pg.inner_text("#exact-alpha") == "0.02205"
    assert pg.inner_text("#exact-beta") == "0.09958"
    assert "52" in pg.inner_text("#fixed")
    shot(pg, "07-workbench")
    pg.set_viewport_size({"width": 820, "height": 1180})   # a tablet
    pg.goto(server.url + "/ui/overview")
    shot(pg, "08-overview-tablet")


def test_case_file_download_and_new_cycle(page, site):
    server, keys = site
    pg = page
    open_as(pg, server, keys.admin, "/ui/facilities/SA-305")
    assert pg.inner_text("#cycle-status") == "Cleared"
    with pg.expect_download() as info:
        pg.click("#casefile")
    path = info.value.path()
    assert Path(path).read_bytes().startswith(b"%PDF")
    pg.click("#open-cycle")
    pg.wait_for_selector(".flash.ok")
    assert pg.inner_text("#cycle-status") == "Monitoring" and "Cycle 2 opened" in pg.inner_text(".flash.ok")
    shot(pg, "09-facility-new-cycle")


def test_forged_or_missing_csrf_is_refused(page, site):
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst, "/ui/facilities/SA-306")
    url = server.url + "/ui/facilities/SA-306/records/seed-6-3/void"
    for form in ({"reason": "x", "cycle": "1", "csrf": "forged"}, {"reason": "x", "cycle": "1"}):
        resp = pg.request.post(url, form=form, max_redirects=0)
        assert resp.status == 403
    pg.reload()
    assert pg.inner_text("#cycle-nonconforming") == "1"       # nothing was voided
    shot(pg, "10-facility-unchanged")


def test_keyboard_only_sign_in(page, site):
    server, keys = site
    pg = page
    pg.goto(server.url + "/ui/signin")
    assert pg.evaluate("document.activeElement.id") == "key"     # the key field has focus
    pg.keyboard.type(keys.analyst)
    pg.keyboard.press("Tab")                                     # to the Sign in button
    assert pg.evaluate("document.activeElement.textContent") == "Sign in"
    pg.keyboard.press("Enter")
    pg.wait_for_url(re.compile(r"/ui/overview"))
    pg.keyboard.press("/")
    assert pg.evaluate("document.activeElement.id") == "search"
