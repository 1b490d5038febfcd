"""Fixtures for browser tests: a real olibra server on 127.0.0.1 and Debian's headless chromium via Playwright.

Without /usr/bin/chromium (or the playwright package) the browser tests are
skipped with the reason, unless OLIBRA_REQUIRE_BROWSER=1 (as in CI), which
turns the skip into a failure. `playwright install` is never needed: the
tests drive the system's chromium.
"""

from __future__ import annotations

import os
import threading
from dataclasses import dataclass
from pathlib import Path

import pytest
from werkzeug.serving import make_server

from library.catalogue import accounts, curation, seed, transfer
from library.catalogue.database import Catalogue, initialize
from webui import create_app

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
SCREENSHOTS = Path(__file__).resolve().parents[2] / "artifacts" / "screenshots"
SEED_NAMES = ("(R)-(+)-Limonene", "(S)-(-)-Limonene", "Citral", "Geranial", "Octanal", "Linalool", "Eugenol")
PASSWORD = "browser test password"


def _unavailable(reason: str):
    if os.environ.get("OLIBRA_REQUIRE_BROWSER") == "1":
        pytest.fail(f"OLIBRA_REQUIRE_BROWSER=1 but {reason}")
    pytest.skip(f"browser tests skipped: {reason} (install Debian's chromium and `pip install playwright`; "
                "set OLIBRA_REQUIRE_BROWSER=1 to make this a failure)")


@dataclass
class LiveServer:
    url: str
    catalogue: Catalogue
    seed_names: tuple[str, ...] = SEED_NAMES


@pytest.fixture(scope="module")
def live_server(tmp_path_factory):
    """olibra's app on a free port of 127.0.0.1 (werkzeug's threaded server in a thread), seeded catalogue."""
    folder = tmp_path_factory.mktemp("browser")
    catalogue = initialize(f"sqlite:///{folder / 'catalogue.sqlite'}")
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
        rows = seed.seed_rows(SEED_NAMES)
        assert transfer.import_rows(session, rows, actor="seed").count("added") == len(SEED_NAMES)
    with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
        accounts.create_user(session, "cora", PASSWORD, "curator")
    app = create_app({"OLIBRA_DB": catalogue.url, "SECRET_KEY": os.urandom(32).hex(), "OLIBRA_JOB_PROCESSES": 1,
                      "OLIBRA_COMPUTE_ON_ADD": False})
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, name="olibra-test-server", daemon=True)
    thread.start()
    yield LiveServer(f"http://127.0.0.1:{server.server_port}", catalogue)
    server.shutdown()
    thread.join(timeout=30)
    catalogue.dispose()


@pytest.fixture(scope="module")
def browser():
    if not CHROMIUM.exists():
        _unavailable(f"{CHROMIUM} is missing")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("the playwright package is not installed")
    with sync_playwright() as playwright:
        launched = playwright.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        yield launched
        launched.close()


@pytest.fixture
def page(browser, live_server):
    """A fresh browser context (no cookies) at the server; console errors are collected."""
    context = browser.new_context(base_url=live_server.url, viewport={"width": 1280, "height": 900})
    context.set_default_timeout(20_000)
    opened = context.new_page()
    opened.console_errors = []
    opened.on("console", lambda m: m.type == "error" and opened.console_errors.append(m.text))
    yield opened
    context.close()


@pytest.fixture
def signed_in(page):
    page.goto("/")
    page.fill("#username", "cora")
    page.fill("#password", PASSWORD)
    page.click("button:has-text('Sign in')")
    page.wait_for_url("**/")
    return page


@pytest.fixture
def expect(browser):
    """Playwright's auto-waiting assertions (imported only once the browser is known to be there)."""
    from playwright.sync_api import expect as playwright_expect

    return playwright_expect


@pytest.fixture(scope="session")
def screenshot():
    """Save a full-page screenshot as artifacts/screenshots/NAME.png."""
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)

    def save(page, name: str) -> None:
        page.screenshot(path=str(SCREENSHOTS / f"{name}.png"), full_page=True)
    return save
