"""Browser-test fixtures: the real server in a subprocess, Debian's chromium driven by playwright.

If /usr/bin/chromium is missing the tests are skipped, unless SCALEWRIGHT_REQUIRE_BROWSER=1 (set by
.ci/run), in which case they fail. Timings (page load, click to updated heatmap) are written to
bench/out/browser_timings.json for ``make bench``; no test asserts on speed.
"""
from __future__ import annotations

import contextlib
import json
import os
import time
from pathlib import Path

import pytest

from tests.serverproc import running_server

from .helpers import upload

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--no-first-run"]
TIMINGS_FILE = ROOT / "bench" / "out" / "browser_timings.json"


def _require_browser():
    if CHROMIUM.exists():
        return
    message = f"{CHROMIUM} is not installed (apt-get install chromium)."
    if os.environ.get("SCALEWRIGHT_REQUIRE_BROWSER") == "1":
        pytest.fail(message + " SCALEWRIGHT_REQUIRE_BROWSER=1, so this is a failure.", pytrace=False)
    pytest.skip(message)


@pytest.fixture(scope="session")
def server(tmp_path_factory):
    """The real server (``python -m server serve``) on a free port with an empty data folder."""
    _require_browser()
    data = tmp_path_factory.mktemp("browser-data")
    with running_server(data / "d", log=data / "server.log") as (_, base):
        yield base


@pytest.fixture(scope="session")
def demo(server):
    """The demo wave 1 (invented workshop data, demo_data/), uploaded through the API."""
    return upload(server, (DEMO / "workshop_responses.csv").read_bytes(), "workshop_responses.csv",
                  (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")


@pytest.fixture(scope="session")
def browser():
    _require_browser()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture
def page(browser):
    context = browser.new_context(viewport={"width": 1400, "height": 900})
    pg = context.new_page()
    pg.errors = []
    pg.on("pageerror", lambda e: pg.errors.append(str(e)))
    yield pg
    context.close()


@pytest.fixture(scope="session")
def timings():
    """Collects timings during the session and writes them for ``make bench`` at the end."""
    out: dict[str, list] = {}
    yield out
    if not out:
        return
    TIMINGS_FILE.parent.mkdir(parents=True, exist_ok=True)
    previous = {}
    with contextlib.suppress(OSError, ValueError):  # keep the timings of tests that did not run (a -k selection)
        previous = json.loads(TIMINGS_FILE.read_text()).get("timings", {})
    TIMINGS_FILE.write_text(json.dumps({"written_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                                        "units": "milliseconds, wall clock from the test driver unless "
                                                 "the name ends in _in_page_ms (performance.now in the page)",
                                        "timings": {**previous, **out}}, indent=2))


@pytest.fixture
def axe_page(browser):
    """A page whose Content-Security-Policy is bypassed, only so that the test can inject axe-core inline."""
    context = browser.new_context(viewport={"width": 1400, "height": 900}, bypass_csp=True)
    pg = context.new_page()
    pg.errors = []
    pg.on("pageerror", lambda e: pg.errors.append(str(e)))
    yield pg
    context.close()
