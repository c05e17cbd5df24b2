"""First-run pages and screen details in a real browser (Playwright on Debian's Chromium
against a real uvicorn process). Screenshots go to artifacts/browser/."""
import re
from urllib.parse import urlparse

import pytest

from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store

from .conftest import make_keys, record
from .live_server import LiveServer, quiet_config
from .test_ui_browser import ARGS, CHROMIUM, shot

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(CHROMIUM is None, reason="Debian's chromium is not installed "
                                 "(.ci/run installs it)")]
LOCAL = ("127.0.0.1", "localhost")


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("first-run")
    db = tmp / "ui.db"
    settings = load_settings(db_path=db)
    store = Store(db)
    store.migrate()
    keys = make_keys(store)
    m = Monitor(store=store, plans=PlanBook(settings.plans))
    actor = ("seed", "admin")
    for i in range(12):
        m.register_facility(FacilityCreate(facility_id=f"HV-{500 + i}",
                                           name=f"Harlow Vale Scale Service {i}",
                                           plan="dispensers" if i % 2 else "scales"), actor)
    batch = [record("HV-500", f"f-{k}", 1, unit_ref=f"FD-{k}") for k in range(3)]   # flagged
    batch += [record("HV-501", f"c-{k}", 0) for k in range(60)]                      # cleared
    batch += [record("HV-502", f"m-{k}", int(k % 7 == 3)) for k in range(25)]
    m.post_records({"records": batch}, actor, with_state=False)
    with LiveServer(db, config=quiet_config(tmp)) as server:
        yield server, keys


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


@pytest.fixture
def offline(browser):
    """A browser context whose every request off the host is aborted (an offline network)."""
    context = browser.new_context(viewport={"width": 1280, "height": 900})
    blocked = []

    def gate(route):
        if urlparse(route.request.url).hostname in LOCAL:
            route.continue_()
        else:
            blocked.append(route.request.url)
            route.abort()

    context.route("**/*", gate)
    pg = context.new_page()
    pg.blocked = blocked
    pg.console_errors = []
    pg.on("console", lambda msg: msg.type == "error" and pg.console_errors.append(msg.text))
    yield pg
    context.close()


def test_docs_work_with_the_network_blocked(offline, site):
    server, keys = site
    pg = offline
    pg.goto(server.url + "/docs")
    pg.wait_for_selector(".swagger-ui .info .title", timeout=30_000)
    assert "seqaudit" in pg.inner_text(".swagger-ui .info .title")
    pg.wait_for_selector("button.authorize")                    # the bearer-key scheme
    op = pg.locator("#operations-facilities-register_v1_facilities_post")
    op.locator(".opblock-summary").click()
    assert "Role: needs an admin key" in op.inner_text()
    shot(pg, "20-docs-offline")
    pg.click("button.authorize")
    assert "bearerKey" in pg.inner_text(".dialog-ux")
    shot(pg, "21-docs-authorize")
    assert pg.blocked == [] and pg.console_errors == [], (pg.blocked, pg.console_errors)
