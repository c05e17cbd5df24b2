"""First-run pages and screen details in a real browser (Playwright on Debian's Chromium
against a real uvicorn process). Screenshots go to artifacts/browser/."""
import re
from pathlib import Path
from urllib.parse import urlparse

import pytest

from service.schemas import FacilityCreate

from .browser import BROWSER, LOCAL, new_page, open_as, seeded, serve, shot, sign_in
from .conftest import record

pytestmark = BROWSER


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    seed = seeded(tmp_path_factory, "first-run")
    m, actor = seed.monitor, seed.actor
    for i in range(12):
        m.register_facility(FacilityCreate(facility_id=f"HV-{500 + i}",
                                           name=f"Harlow Vale Scale Service {i}",
                                           plan="dispensers" if i % 2 else "scales"), actor)
    batch = [record("HV-500", f"f-{k}", 1, unit_ref=f"FD-{k}") for k in range(3)]   # flagged
    batch += [record("HV-501", f"c-{k}", 0) for k in range(60)]                      # cleared
    batch += [record("HV-502", f"m-{k}", int(k % 7 == 3)) for k in range(25)]
    m.register_facility(FacilityCreate(facility_id="HV-520", name="Capped Scale Agency",
                                       plan="scales_capped"), actor)
    batch += [record("HV-520", f"cap-{k}", int(k % 9 == 4)) for k in range(40)]
    m.post_records({"records": batch}, actor, with_state=False)
    with serve(seed) as server:
        yield server, seed.keys


@pytest.fixture
def offline(browser):
    """A page whose every request off the host is aborted (an offline network)."""
    with new_page(browser) as pg:
        blocked = []

        def gate(route):
            if urlparse(route.request.url).hostname in LOCAL:
                route.continue_()
            else:
                blocked.append(route.request.url)
                route.abort()

        pg.context.route("**/*", gate)
        pg.blocked = blocked
        pg.console_errors = []
        pg.on("console", lambda msg: msg.type == "error" and pg.console_errors.append(msg.text))
        yield pg


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


def luminance(rgb: str) -> float:
    """Relative luminance of a CSS rgb()/rgba() colour (WCAG 2.1, 'relative luminance')."""
    r, g, b = (int(v) for v in re.findall(r"[\d.]+", rgb)[:3])
    lin = [c / 255 / 12.92 if c / 255 <= 0.04045 else ((c / 255 + 0.055) / 1.055) ** 2.4
           for c in (r, g, b)]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def contrast(fg: str, bg: str) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05)."""
    a, b = sorted((luminance(fg), luminance(bg)), reverse=True)
    return (a + 0.05) / (b + 0.05)


def test_wcag_contrast_formula_on_known_pairs():
    # WCAG 2.1: black on white is 21:1; #777777 on white is about 4.48:1 (just fails AA),
    # values from the WCAG understanding document for 1.4.3 (from memory)
    assert contrast("rgb(0, 0, 0)", "rgb(255, 255, 255)") == pytest.approx(21.0)
    assert contrast("rgb(119, 119, 119)", "rgb(255, 255, 255)") == pytest.approx(4.48, abs=0.01)


def test_sign_in_error_is_shown_once(page, site):
    server, keys = site
    sign_in(page, server, keys.field)
    page.wait_for_selector("#signin-error")
    assert page.locator(".flash").count() == 1
    assert page.locator(".flash.ok").count() == 0
    assert "Field keys can only post records" in page.inner_text("#signin-error")
    shot(page, "22-signin-error-once")


def test_acknowledge_button_is_readable(page, site):
    server, keys = site
    open_as(page, server, keys.analyst, "/ui/alerts")
    button = page.locator("#alerts button:text('Acknowledge')").first
    fg, bg = button.evaluate("b => [getComputedStyle(b).color, getComputedStyle(b).backgroundColor]")
    assert contrast(fg, bg) >= 4.5, (fg, bg)
    button.hover()
    fg, bg = button.evaluate("b => [getComputedStyle(b).color, getComputedStyle(b).backgroundColor]")
    assert contrast(fg, bg) >= 4.5, ("hovered", fg, bg)
    shot(page, "23-alerts-acknowledge")


def test_path_chart_ticks_and_labels(page, site):
    server, keys = site
    open_as(page, server, keys.analyst, "/ui/facilities/HV-520")
    chart = page.locator("svg.chart").first
    xs = chart.locator("text.tick-x").all_text_contents()
    ys = chart.locator("text.tick-y").all_text_contents()
    assert xs and all(re.fullmatch(r"\d+", t) for t in xs), xs         # whole units
    assert "150" in xs or int(xs[-1]) >= 140                           # the cap is on the axis
    values = [float(t) for t in ys]
    steps = {round(b - a, 9) for a, b in zip(values, values[1:])}
    assert len(steps) == 1, ys                                         # evenly spaced
    step = steps.pop()
    assert any(abs(step - m * 10 ** k) < 1e-9 for m in (1, 2, 5) for k in range(-2, 3)), step
    assert all(abs(v / step - round(v / step)) < 1e-9 for v in values), ys  # round values

    def box(sel):
        return [e.evaluate("e => { const r = e.getBoundingClientRect(); "
                           "return [r.left, r.top, r.right, r.bottom]; }")
                for e in chart.locator(sel).all()]

    caps, bounds = box("text.cap-label"), box("text.boundary-label")
    assert len(caps) == 1 and len(bounds) == 2
    for c in caps:
        for b in bounds:
            apart = c[2] <= b[0] or b[2] <= c[0] or c[3] <= b[1] or b[3] <= c[1]
            assert apart, (c, b)
    shot(page, "24-facility-capped-chart")


def test_void_asks_first(page, site):
    server, keys = site
    open_as(page, server, keys.analyst, "/ui/facilities/HV-502")
    row = page.locator("tr[data-record='m-10']")
    row.locator("input[name=reason]").fill("typed under the wrong agency")
    asked = []

    def dismiss(dialog):
        asked.append(dialog.message)
        dialog.dismiss()

    page.once("dialog", dismiss)
    row.locator("button:text('Void')").click()
    page.wait_for_timeout(300)
    assert asked and "Void record m-10?" in asked[0]
    assert "void" not in (page.get_attribute("tr[data-record='m-10']", "class") or "")
    page.once("dialog", lambda dialog: dialog.accept())
    row.locator("button:text('Void')").click()
    page.wait_for_selector(".flash.ok")
    assert "void" in page.get_attribute("tr[data-record='m-10']", "class")
    shot(page, "25-void-confirmed")


def test_overview_keeps_the_llr_column_at_800px(page, site):
    server, keys = site
    page.set_viewport_size({"width": 800, "height": 1000})
    open_as(page, server, keys.analyst)
    th = page.locator("#facilities th.llr")
    assert th.is_visible()
    right = th.evaluate("e => e.getBoundingClientRect().right")
    assert right <= 800, right                                  # in view without scrolling
    assert page.locator("#facilities tbody tr").first.locator("td.llr svg").is_visible()
    shot(page, "26-overview-800px")


def test_unknown_page_says_what_was_asked(page, site):
    server, keys = site
    open_as(page, server, keys.analyst)
    resp = page.goto(server.url + "/ui/no-such-page")
    assert resp.status == 404
    assert "/ui/no-such-page" in page.inner_text("#error-detail")
    shot(page, "27-not-found")


def test_download_buttons(page, site):
    server, keys = site
    open_as(page, server, keys.admin)
    for sel, head in (("#facilities-csv", "facility_id,"), ("#actions-csv", "id,at,")):
        with page.expect_download() as info:
            page.click(sel)
        text = Path(info.value.path()).read_text(encoding="utf-8")
        assert text.startswith(head), text[:80]
    page.goto(server.url + "/ui/facilities/HV-500")
    with page.expect_download() as info:
        page.click("#records-csv")
    assert "FD-2" in Path(info.value.path()).read_text(encoding="utf-8")
    page.goto(server.url + "/ui/alerts?state=all")
    with page.expect_download() as info:
        page.click("#alerts-csv")
    assert Path(info.value.path()).read_text(encoding="utf-8").startswith("alert_id,")
