"""The robustness view (issue 13): a resampling run started from the dashboard shows its progress, then the
flag rates, the factor counts and the interval whiskers; the board's flag chips carry the rates; a second run
can be cancelled; progress on the live channel is not taken for a teammate's change; axe-core finds no
serious violation on the view."""
from __future__ import annotations

import pytest

from .axe import serious_violations
from .helpers import js_state, open_dataset, wait_js

pytestmark = pytest.mark.browser


def test_a_run_from_the_dashboard_shows_progress_rates_whiskers_and_can_be_cancelled(axe_page, server, demo):
    page = axe_page
    open_dataset(page, server, demo["id"], view="robustness")
    page.wait_for_selector("#rob-start")
    assert page.get_attribute("#tab-robustness", "aria-selected") == "true"
    page.fill("#rob-n", "20")
    page.click("#rob-start")
    page.wait_for_selector("#rob-progress progress")
    page.wait_for_selector("#rob-progress[data-state='done']", timeout=120_000)
    page.wait_for_selector("#rob-flags")
    assert page.inner_text("#rob-count").strip().startswith("20 of 20 resamples")
    assert page.get_attribute("#rob-bar", "value") == "20"
    settings = page.inner_text("#rob-settings")
    assert "20 resamples" in settings and "seed" in settings
    n_items = len(js_state(page, "s.analysis.items"))
    assert page.locator("#rob-flags tbody tr").count() == n_items
    assert page.locator("svg.rob-whisker").count() >= 3  # alpha, omega total, omega hierarchical at least
    assert page.locator(".rob-retention tbody tr").count() >= 1
    # progress came as live messages: no toast line or feed entry about a teammate
    assert page.locator("#feed li").count() == 0
    # sorted by the most frequent flag: rates descend
    page.click("#rob-sort-flag")
    assert page.get_attribute("#rob-flags th[aria-sort]", "aria-sort") == "descending"
    rates = [int(t.split()[0]) for t in page.locator("#rob-flags .rob-top").all_inner_texts()]
    assert rates == sorted(rates, reverse=True)
    found = serious_violations(page)
    assert found == "", f"axe-core, robustness view:\n{found}"
    # the board's flag chips carry their rate
    page.click("#tab-board")
    page.wait_for_selector("#item-board .flag")
    chips = page.locator("#item-board td.flags .flag:not(.warn)").all_inner_texts()
    assert chips and all(" · " in c and c.endswith("%") for c in chips), chips
    # the save-snapshot dialog offers to keep the run; the stored snapshot has its summary
    page.click("#save-snapshot")
    page.wait_for_selector("#snap-include-resampling")
    assert "20 resamples" in page.inner_text("label:has(#snap-include-resampling)")
    page.fill("#snap-name", "with resampling")
    with page.expect_response(lambda r: r.url.endswith("/snapshots") and r.request.method == "POST") as resp:
        page.click("#snap-save")
    saved = resp.value.json()
    assert resp.value.status == 201 and saved["resampling"]["n_resamples"] == 20
    assert saved["resampling"]["run_id"] == js_state(page, "s.robustness.run.run_id")
    page.wait_for_selector("#tab-snapshots[aria-selected='true']")  # the page shows the snapshots once it saved
    # after a drop the result is kept but marked as for an earlier item set, and the chips lose their rates
    page.click("#tab-board")
    page.wait_for_selector("#item-board")
    first = js_state(page, "s.analysis.items[0].name")
    page.locator(f"#item-board tbody tr[data-item='{first}'] .toggle").first.click()
    wait_js(page, "() => window.scalewright.state.dropped.length === 1")
    page.click("#tab-robustness")
    page.wait_for_selector("#rob-flags")
    assert "earlier item set" in page.inner_text("#view .note.stale")
    page.click("#undo")
    wait_js(page, "() => window.scalewright.state.dropped.length === 0")
    # a second, long run is cancelled: the view says so
    page.click("#tab-robustness")
    page.fill("#rob-n", "2000")
    page.click("#rob-start")
    page.wait_for_selector("#rob-progress[data-state='running']", timeout=60_000)
    page.click("#rob-cancel")
    page.wait_for_selector("#rob-progress[data-state='cancelled']", timeout=30_000)
    assert "cancelled" in page.inner_text("#rob-count")
    assert page.locator("#rob-cancel").count() == 0
    assert page.locator("#rob-flags").count() == 0  # the cancelled run has no result to show
    assert page.errors == []


def test_an_interrupted_run_shows_its_message_and_can_be_started_again(page, server, demo):
    """A run whose server process stopped is answered ``interrupted`` (server/runs.py): the view stops waiting,
    shows the server's message as text, and offers Start again. The runs are answered by the test here."""
    import json

    fake = {"run_id": "gone1", "dataset_id": demo["id"], "state": "running", "progress": {"done": 3, "total": 40},
            "settings": {}, "n_resamples": 40, "seed": 1, "started_at": "2026-12-01T14:01:00.000000Z",
            "finished_at": None}
    message = "The server process computing this run stopped at about 14:02 UTC <b>on</b> 2026-12-01. Start again."
    gone = {**fake, "state": "interrupted", "finished_at": "2026-12-01T14:02:09.000000Z",
            "error": {"code": "interrupted", "message": message, "details": {}}}
    reads = []

    def answer(route):
        if route.request.method == "POST":
            return route.fulfill(status=202, content_type="application/json", body=json.dumps(fake))
        reads.append(route.request.url)
        return route.fulfill(status=200, content_type="application/json", body=json.dumps(gone))

    page.route("**/resampling", answer)
    page.route("**/api/runs/gone1", answer)
    open_dataset(page, server, demo["id"], view="robustness")
    page.wait_for_selector("#rob-start")
    page.fill("#rob-n", "40")
    page.click("#rob-start")
    page.wait_for_selector("#rob-progress[data-state='running']")
    assert page.locator("#rob-cancel").count() == 1
    # no live message comes for it: the page asks the server, which answers interrupted
    page.wait_for_selector("#rob-progress[data-state='interrupted']", timeout=15_000)
    assert page.inner_text("#rob-count").strip() == "3 of 40 resamples — interrupted"
    assert page.inner_text("#view .note.error") == message  # as text: the <b> is not markup
    assert page.locator("#view .note.error b").count() == 0
    assert page.locator("#rob-cancel").count() == 0 and page.is_enabled("#rob-start")
    n = len(reads)
    page.wait_for_timeout(2500)
    assert len(reads) == n  # it stopped asking
    page.unroute("**/resampling")
    page.unroute("**/api/runs/gone1")
    assert page.errors == []
