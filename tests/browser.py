"""What the browser tests share: Playwright driving Debian's headless Chromium
(/usr/bin/chromium, no browser download) against a real uvicorn process
(tests/live_server.py). Screenshots go to artifacts/browser/.

A browser test module sets ``pytestmark = BROWSER``, defines a module-scoped ``site``
fixture (usually ``with serve(seeded(...)) as server``) and asks for ``browser`` and
``page``: tests/conftest.py registers those two fixtures from here.
"""
from __future__ import annotations

import re
import shutil
from contextlib import contextmanager
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING
from urllib.parse import urlparse

import pytest

from service.operations import Monitor, PlanBook
from service.settings import load_settings
from service.store import Store

from .live_server import LiveServer, quiet_config

if TYPE_CHECKING:
    from .conftest import Keys

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
ARTIFACTS = Path(__file__).resolve().parent.parent / "artifacts" / "browser"
ARGS = ["--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]
LOCAL = ("127.0.0.1", "localhost")
BROWSER = [pytest.mark.browser,
           pytest.mark.skipif(CHROMIUM is None, reason="Debian's chromium is not installed "
                              "(.ci/run installs it)")]


@dataclass
class Seeded:
    """A fresh database in its own folder, migrated, with a key of each role."""
    folder: Path
    db: Path
    store: Store
    keys: Keys
    actor = ("seed", "admin")

    @cached_property
    def monitor(self) -> Monitor:
        """The operations over the store, with the repository's plans."""
        return Monitor(store=self.store, plans=PlanBook(load_settings(db_path=self.db).plans))


def seeded(tmp_path_factory, name: str) -> Seeded:
    """``name.db`` in a new temporary folder ``name``; fill it, then :func:`serve` it."""
    from .conftest import make_keys      # conftest imports this module's fixtures
    folder = tmp_path_factory.mktemp(name)
    db = folder / f"{name}.db"
    store = Store(db)
    store.migrate()
    return Seeded(folder, db, store, make_keys(store))


def serve(site: Seeded) -> LiveServer:
    """Close the seeding store and give the real server (``seqaudit serve``, scheduler off)
    over the database; use it as a context manager: ``with serve(site) as server``."""
    site.store.close()
    return LiveServer(site.db, config=quiet_config(site.folder))


@pytest.fixture(scope="module")
def browser():
    """One headless Chromium per test module."""
    from playwright.sync_api import sync_playwright
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


@contextmanager
def new_page(browser, width: int = 1280, height: int = 900, **options):
    """A page in a context of its own (``options`` go to ``new_context``), closed after."""
    context = browser.new_context(viewport={"width": width, "height": height}, **options)
    try:
        yield context.new_page()
    finally:
        context.close()


@pytest.fixture
def page(browser, site):
    """A desktop-sized page (the module's ``site`` is up first); the test fails if the page
    loaded anything from outside the host."""
    with new_page(browser) as pg:
        outside = []

        def watch(request):
            host = urlparse(request.url).hostname
            if request.url.startswith("http") and host not in LOCAL:
                outside.append(request.url)

        pg.on("request", watch)
        yield pg
        assert outside == [], f"loaded from outside the host: {outside}"


def shot(pg, name: str) -> None:
    """Save a full-page screenshot as artifacts/browser/<name>.png."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    pg.screenshot(path=str(ARTIFACTS / f"{name}.png"), full_page=True)


def sign_in(pg, server, key: str) -> None:
    """Open the dashboard signed out (it sends us to the sign-in page) and submit ``key``."""
    pg.goto(server.url + "/ui/overview")
    assert pg.url.endswith("/ui/signin")
    pg.fill("#key", key)
    pg.click("button[type=submit]")


def open_as(pg, server, key: str, path: str | None = None) -> None:
    """Sign in with a key the dashboard accepts, wait for the overview, then open ``path``."""
    sign_in(pg, server, key)
    pg.wait_for_url(re.compile(r"/ui/overview"))
    if path is not None:
        pg.goto(server.url + path)


def acknowledge_first(pg, note: str) -> str:
    """Acknowledge the first alert listed with ``note``; returns its id once the page says so."""
    first = pg.locator("#alerts tbody tr[data-alert]").first
    alert_id = first.get_attribute("data-alert")
    first.locator("input[name=note]").fill(note)
    first.locator("button:text('Acknowledge')").click()
    pg.wait_for_selector(".flash.ok")
    assert f"Alert {alert_id} acknowledged" in pg.inner_text(".flash.ok")
    return alert_id
