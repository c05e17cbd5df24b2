"""The program pages in a real browser (Playwright on Debian's Chromium, real uvicorn):
forecast, visits, a bad budget and the CSV download. Screenshots go to artifacts/browser/."""
import re

from .browser import BROWSER, open_as, shot
from .test_ui_browser import site  # noqa: F401

pytestmark = BROWSER


def test_forecast_and_visits_pages(page, site):  # noqa: F811
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst)
    pg.click("header nav a:text('Register forecast')")
    pg.wait_for_url(re.compile(r"/ui/program"))
    open_cycles = int(pg.inner_text("#open-cycles"))
    assert open_cycles >= 30                                  # the seeded register's open ones
    pg.fill("input[name=budget]", "40")
    pg.click("#forecast-form button[type=submit]")
    pg.wait_for_selector("#weeks")
    assert "simulation runs" in pg.inner_text("#weeks")
    shot(pg, "20-program-forecast")
    pg.click("header nav a:text('Visits')")
    pg.wait_for_url(re.compile(r"/ui/program/visits"))
    pg.fill("input[name=budget]", "0")
    pg.click("#visits-form button[type=submit]")
    pg.wait_for_selector("#visits-error")
    assert "at least 1" in pg.inner_text("#visits-error")
    pg.fill("input[name=budget]", "60")
    pg.click("#visits-form button[type=submit]")
    pg.wait_for_selector("#visits tbody tr")
    assert "60 of 60 audits" in pg.inner_text("#visits-summary")
    first = pg.inner_text("#visits tbody tr:first-child")
    assert "never audited" in first
    shot(pg, "21-program-visits")
    with pg.expect_download() as info:
        pg.click("#visits-csv")
    with open(info.value.path(), encoding="utf-8") as fh:
        text = fh.read()
    assert text.splitlines()[0].startswith("rank,facility_id,name,region")
    assert len(text.splitlines()) == pg.locator("#visits tbody tr").count() + 1
