"""Long work shows progress (issue 14): the upload's bar and its reading state; the first analysis says what it
computes and counts the seconds; a heatmap refit updates the drawn chart in place. Nothing is timed here."""
from __future__ import annotations

import json

import numpy as np
import pytest

from .helpers import fitted_marker, js_state, open_dataset, wait_js, wait_refit

pytestmark = pytest.mark.browser

# Every text and value the progress line shows, in order (a MutationObserver in the page).
WATCH = """() => {
  window.progressLog = [];
  const seen = () => {
    const bar = document.querySelector('#upload-progress');
    const words = document.querySelector('#upload-progress-text');
    if (!bar || !words) return;
    const entry = `${bar.hasAttribute('value') ? bar.value : '-'}|${words.textContent}`;
    if (window.progressLog[window.progressLog.length - 1] !== entry) window.progressLog.push(entry);
  };
  new MutationObserver(seen).observe(document.body, { subtree: true, childList: true, characterData: true,
    attributes: true, attributeFilter: ['value'] });
}"""


def big_csv(path, n_rows: int = 110_000, k: int = 45) -> int:
    rng = np.random.default_rng(14)
    f = rng.standard_normal((n_rows, 3))
    z = f @ (np.eye(3)[np.arange(k) % 3] * 0.7).T + rng.standard_normal((n_rows, k)) * 0.7
    x = np.clip(np.round(z + 3), 1, 5).astype(int)
    with open(path, "w") as out:
        out.write(",".join(f"b{j + 1}" for j in range(k)) + "\n")
        np.savetxt(out, x, fmt="%d", delimiter=",")
    return path.stat().st_size


def test_a_large_upload_shows_a_progress_bar_then_reading(page, server, tmp_path):
    size = big_csv(tmp_path / "large_pool.csv")
    assert size > 9_000_000  # about 10 MB
    page.goto(server + "/")
    page.wait_for_selector("#file-responses")
    # Chromium's network emulation: 4 MB/s upstream, so the file travels for a couple of seconds
    cdp = page.context.new_cdp_session(page)
    cdp.send("Network.enable")
    cdp.send("Network.emulateNetworkConditions", {"offline": False, "latency": 0, "downloadThroughput": -1,
                                                  "uploadThroughput": 4 * 1024 * 1024})
    page.evaluate(WATCH)
    page.set_input_files("#file-responses", str(tmp_path / "large_pool.csv"))
    page.click("#upload-button")
    page.wait_for_selector("table.preview", timeout=120_000)
    log = page.evaluate("window.progressLog")
    sending = [e for e in log if "Sending the file…" in e]
    reading = [e for e in log if "Reading the file on the server" in e]
    assert sending and reading, log
    values = [float(e.split("|")[0]) for e in sending if e.split("|")[0] != "-"]
    assert values == sorted(values)  # the bar only moves forward
    assert any(0 < v < 100 for v in values), log  # seen part-way, with the megabytes: "… 37 % (3.9 of 10.4 MB)"
    assert any(" MB)" in e and " of " in e for e in sending), log
    assert all(e.startswith("100|") for e in reading)  # the bar is full while the server reads
    assert log.index(reading[0]) > log.index(sending[-1])
    assert "110000 respondents, 45 items" in page.inner_text("#view")
    assert page.errors == []


def test_the_first_analysis_says_what_it_computes_and_counts_seconds(page, server, demo):
    held = []
    page.route("**/analysis", lambda route: held.append(route))  # the answer is held back until released below
    page.goto(f"{server}/?d={demo['id']}&v=loadings")
    wait_js(page, "() => (document.querySelector('#computing-elapsed')?.textContent || '').startsWith('2 s')",
            timeout=20_000)
    text = page.inner_text("#computing")
    assert "Computing correlations, factor analysis, parallel analysis…" in text
    assert "(24 items × 400 respondents)" in text  # demo_data/README: 24 items, 400 respondents
    assert page.get_attribute("#computing", "role") == "status"
    wait_js(page, "() => (document.querySelector('#refitting')?.textContent || '').includes('s')", timeout=5_000)
    for route in held:
        route.continue_()
    page.unroute("**/analysis")
    page.wait_for_selector("#heatmap[data-rendered]", timeout=60_000)
    assert page.locator("#computing").count() == 0
    assert page.locator("#refitting").count() == 0
    assert page.errors == []


def test_a_refit_updates_the_drawn_heatmap_in_place(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    page.evaluate("() => { window.heatBefore = document.querySelector('#heatmap');"
                  " window.svgBefore = document.querySelector('#heatmap svg'); }")
    before = fitted_marker(page)
    page.locator("#heatmap .heat-label").first.click()  # a click on the first row's label opens its pick bar
    item = page.inner_text("#pick-bar strong")
    page.click("#pick-drop")
    wait_refit(page, before)
    wait_js(page, "() => document.querySelector('#heatmap')?.dataset.rendered !== '1'")
    assert page.evaluate("() => document.querySelector('#heatmap') === window.heatBefore")  # the same chart, updated
    assert page.evaluate("() => document.querySelector('#heatmap svg') === window.svgBefore")  # its SVG too
    ticks = page.evaluate("[...document.querySelectorAll('#heatmap .heat-label')].map(t => t.textContent)")
    assert ticks and not any(t.split(" · ")[0].lstrip("⚑ ") == item for t in ticks)
    assert js_state(page, "s.dropped") == [item]
    assert page.errors == []


def test_rapid_clicks_coalesce_and_the_latest_state_wins(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    asked = []
    page.on("request", lambda r: asked.append(r.post_data) if r.url.endswith("/analysis") else None)
    before = fitted_marker(page)
    for item in ("W1", "W2", "W3", "W4"):
        page.click(f'tr[data-item="{item}"] button.toggle')
    wait_refit(page, before)
    wait_js(page, "() => !document.body.classList.contains('busy')")
    assert js_state(page, "s.dropped") == ["W1", "W2", "W3", "W4"]
    assert set(js_state(page, "Object.keys(s.analysis.efa.loadings)")).isdisjoint({"W1", "W2", "W3", "W4"})
    assert 1 <= len(asked) <= 4  # at most one request per click; the last asks for the latest state
    last = json.loads(asked[-1])["items"]  # the kept items of the latest state
    assert not {"W1", "W2", "W3", "W4"} & set(last) and len(last) == 20
    assert page.errors == []

