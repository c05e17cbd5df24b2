"""Frames and draws on the facility page in a real browser (Playwright, Debian's Chromium,
real uvicorn). Screenshots go to artifacts/browser/."""
from pathlib import Path

from .browser import BROWSER, open_as, shot
from .test_api_draws import SEED, by_hand
from .test_ui_browser import site  # noqa: F401

pytestmark = BROWSER


def test_register_a_frame_draw_and_download(page, site):  # noqa: F811
    server, keys = site
    pg = page
    open_as(pg, server, keys.analyst)
    pg.goto(server.url + "/ui/facilities/SA-310")
    refs = [f"FD-310-{i:03d}" for i in range(1, 61)]
    pg.fill("#frame-label", "week 48")
    pg.fill("#frame-start", "2026-11-23")
    pg.fill("#frame-end", "2026-11-29")
    pg.set_input_files("#frame-file", files=[{
        "name": "week48.csv", "mimeType": "text/csv",
        "buffer": ("unit_ref\n" + "\n".join(reversed(refs)) + "\nFD-310-007\n").encode()}])
    pg.click("#frame-submit")
    pg.wait_for_selector(".flash.ok")
    assert "60 units" in pg.inner_text(".flash.ok") and "1 duplicate" in pg.inner_text(".flash.ok")
    pg.fill("#draw-size", "8")
    pg.fill("#draw-seed", SEED)
    pg.click("#draw-submit")
    pg.wait_for_selector(".flash.ok")
    _, key, expected = by_hand(refs, "9319./2.5.8.10.12./9.18.26.34.41.45./", 8)
    listed = pg.eval_on_selector_all("ol.drawn li", "items => items.map(i => i.textContent)")
    assert [item.split()[0] for item in listed] == expected
    assert key in pg.inner_text("#draws")
    shot(pg, "11-facility-draws")
    with pg.expect_download() as info:
        pg.click("#draws a:text('CSV')")
    lines = Path(info.value.path()).read_text(encoding="utf-8").splitlines()
    assert [ln.split(",")[4] for ln in lines[1:]] == expected
