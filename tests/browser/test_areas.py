"""More of the dashboard in the browser: stability and agreement, snapshots compare and restore,
projector mode, the access token, and timings on a 60-item pool (recorded, not asserted)."""
from __future__ import annotations

import time

import httpx
import numpy as np
import pytest

from tests.serverproc import running_server

from .conftest import DEMO
from .helpers import fitted_marker, js_state, open_dataset, upload, wait_js, wait_refit, wait_until_fitted

pytestmark = pytest.mark.browser


@pytest.fixture(scope="session")
def retest_wave(server):
    return upload(server, (DEMO / "workshop_retest.csv").read_bytes(), "workshop_retest.csv",
                  (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")


def test_stability_area_shows_scatter_bland_altman_and_icc(page, server, demo, retest_wave):
    open_dataset(page, server, demo["id"], view="stability")
    page.select_option("#wave-first", demo["id"])
    page.select_option("#wave-second", retest_wave["id"])
    page.click("#run-retest")
    page.wait_for_selector("table.icc")
    icc_rows = page.locator("table.icc tbody tr").count()
    assert icc_rows == 6  # the six McGraw & Wong forms (issue 6)
    page.wait_for_selector("#bland-altman .scatterlayer .point")  # plotly is loaded by the first chart that needs it
    assert page.locator("#retest-scatter .scatterlayer .point").count() > 100  # demo_data/README: 144 came back
    assert page.locator("#bland-altman .scatterlayer .point").count() > 100
    assert "144" in page.inner_text("#retest-result")  # matched respondents, demo_data/README
    assert "recommended" in page.inner_text("table.icc")

    # paste a ratings table: 10 units, 2 raters agreeing on 8 -> percent agreement .80 (common practice)
    text = "unit,a,b\n" + "\n".join(f"u{i},{v},{w}" for i, (v, w) in enumerate(
        [(1, 1), (2, 2), (3, 3), (1, 1), (2, 2), (3, 3), (1, 1), (2, 2), (3, 1), (1, 2)]))
    page.fill("#ratings-text", text)
    page.click("#run-agreement")
    page.wait_for_selector("table.agreement")
    first_row = page.locator("table.agreement tbody tr").first.inner_text()
    # 8 of 10 units agree (the invented example); a share, shown as one
    assert "80.0% (8 of 10 units)" in first_row
    assert "Cohen" in page.inner_text("table.agreement")
    assert page.errors == []


def test_snapshots_compare_and_restore(page, server, demo):
    base = f"{server}/api/datasets/{demo['id']}/snapshots"
    all_items = [it["name"] for it in demo["items"]]
    settings = {"correlation": "pearson", "extraction": "minres", "rotation": "promax", "missing": "pairwise"}
    a = httpx.post(base, json={"name": "A: without C7", "items": [i for i in all_items if i != "C7"],
                               "removed": [{"item": "C7", "reason": "weak"}], "settings": settings}, timeout=60)
    assert a.status_code == 201, a.text
    keep_b = [i for i in all_items if i not in ("C7", "W3")]
    b = httpx.post(base, json={"name": "B: without C7 and W3", "items": keep_b,
                               "removed": [{"item": "C7", "reason": "weak"}, {"item": "W3", "reason": "duplicate"}],
                               "settings": settings}, timeout=60)
    assert b.status_code == 201, b.text
    open_dataset(page, server, demo["id"], view="snapshots")
    page.wait_for_selector("table.snapshots")
    row_a = page.locator("table.snapshots tbody tr", has_text="A: without C7")
    row_b = page.locator("table.snapshots tbody tr", has_text="B: without C7 and W3")
    row_a.get_by_role("button", name="Compare").click()
    row_b.get_by_role("button", name="Compare").click()
    page.wait_for_selector("#comparison")
    text = page.inner_text("#comparison")
    assert "items removed W3" in text  # from the older snapshot A to the newer B
    # named columns, not "First/Second"
    assert "B: without C7 and W3" in page.inner_text("#comparison table.compare-coefficients thead")
    row_b = page.locator("table.snapshots tbody tr", has_text="B: without C7 and W3")
    before = fitted_marker(page)
    row_b.get_by_role("button", name="Restore").click()
    wait_refit(page, before)
    assert js_state(page, "s.dropped") == ["C7", "W3"]  # in the order they were removed
    assert js_state(page, "s.settings.rotation") == "promax"
    assert js_state(page, "s.view") == "board"
    assert "rot=promax" in page.url
    report = httpx.get(f"{server}/api/snapshots/{b.json()['id']}/report")
    assert report.status_code == 200

    # a snapshot saved after a restore names the restored one as its parent (lineage)
    page.click("#save-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    assert "B: without C7 and W3" in page.inner_text("#snapshot-dialog")
    page.fill('.reason-text[data-item="C7"]', "weak")
    page.fill('.reason-text[data-item="W3"]', "duplicate")
    page.fill("#snap-name", "C: revision of B")
    page.click("#snap-save")
    page.wait_for_selector("table.snapshots .lineage")
    assert "revises B: without C7 and W3" in page.inner_text("table.snapshots")
    snaps = httpx.get(base).json()
    c = next(s for s in snaps if s["name"] == "C: revision of B")
    assert c["parent"] == b.json()["id"]
    assert page.errors == []


def test_board_filters_and_sorts(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    page.select_option("#filter-construct", "ownership")
    names = page.eval_on_selector_all("#item-board tbody tr", "rows => rows.map(r => r.dataset.item)")
    assert names == [f"O{i}" for i in range(1, 9)]  # demo_data/README: O1-O8 are the ownership items
    page.select_option("#filter-construct", "")
    page.select_option("#filter-flag", "any")
    flagged = page.eval_on_selector_all("#item-board tbody tr", "rows => rows.map(r => r.dataset.item)")
    expected = js_state(page, "[...new Set(s.analysis.efa.flags.map(f => f.item))]")
    assert sorted(flagged) == sorted(expected) and flagged
    page.select_option("#filter-flag", "")
    page.click("#item-board th button.sort >> text=Item-rest r")
    values = js_state(page, "[...document.querySelectorAll('#item-board tbody tr')].map(r => "
                            "s.analysis.items.find(i => i.name === r.dataset.item).item_rest_r)")
    assert values == sorted(values)  # weakest first
    page.click("#item-board th button.sort >> text=Item-rest r")
    values = js_state(page, "[...document.querySelectorAll('#item-board tbody tr')].map(r => "
                            "s.analysis.items.find(i => i.name === r.dataset.item).item_rest_r)")
    assert values == sorted(values, reverse=True)
    # tabs move with the arrow keys
    page.focus("#tab-board")
    page.keyboard.press("ArrowRight")
    assert js_state(page, "s.view") == "loadings"
    assert page.evaluate("document.activeElement.id") == "tab-loadings"


def test_projector_mode_makes_the_text_larger(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    small = page.evaluate("parseFloat(getComputedStyle(document.querySelector('#item-board td.wording')).fontSize)")
    page.click("#projector")
    large = page.evaluate("parseFloat(getComputedStyle(document.querySelector('#item-board td.wording')).fontSize)")
    assert large >= small * 1.3
    assert page.get_attribute("#projector", "aria-pressed") == "true"
    page.reload()
    wait_until_fitted(page)
    assert page.evaluate("document.body.classList.contains('projector')")  # remembered on this machine


def test_flag_message_shows_on_focus(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    flag = page.locator("#item-board .flag").first
    message = flag.get_attribute("data-tip")
    assert message and len(message) > len(flag.inner_text())  # short word, full sentence on hover/focus
    assert flag.get_attribute("title") is None  # one explanation, not the browser's tooltip on top of ours
    assert message in flag.get_attribute("aria-label")
    flag.focus()
    shown = page.evaluate("getComputedStyle(document.activeElement, '::after').content")
    assert message in shown


def test_dashboard_works_with_the_access_token(browser, tmp_path):
    """A server that needs the token: the page opened with ?token= loads, analyses and goes live."""
    with running_server(tmp_path / "d", token="s3cret") as (_, base):
        assert httpx.get(f"{base}/api/health").status_code == 401
        files = {"file": ("w.csv", (DEMO / "workshop_responses.csv").read_bytes(), "text/csv"),
                 "codebook": ("c.csv", (DEMO / "workshop_codebook.csv").read_bytes(), "text/csv")}
        r = httpx.post(f"{base}/api/datasets", files=files, data={"missing_codes": "-9", "id_column": "respondent"},
                       headers={"X-Scalewright-Token": "s3cret"}, timeout=60)
        assert r.status_code == 201, r.text
        context = browser.new_context()
        page = context.new_page()
        try:
            page.goto(f"{base}/?token=s3cret&d={r.json()['id']}&v=board")
            wait_until_fitted(page)
            assert page.inner_text("#stat-alpha .value").startswith(".")
            wait_js(page, "() => document.body.dataset.live === 'on'", None, 10_000)
            assert "token=s3cret" in page.url  # kept in the address when the state is written
        finally:
            context.close()
        context = browser.new_context()
        page = context.new_page()
        try:
            resp = page.goto(f"{base}/")
            assert resp.status == 401  # without the token nothing is served
        finally:
            context.close()


def test_timings_on_a_60_item_pool(page, server, timings):
    """Click to updated heatmap and page load for 60 items (issue 5's targets); recorded, not asserted."""
    rng = np.random.default_rng(5)
    n, k = 1000, 60
    factors = rng.standard_normal((n, 3))
    load = np.zeros((k, 3))
    for j in range(k):
        load[j, j % 3] = 0.65
    latent = factors @ load.T + rng.standard_normal((n, k)) * 0.75
    answers = np.clip(np.round(latent * 1.1 + 3), 1, 5).astype(int)
    names = [f"P{j + 1:02d}" for j in range(k)]
    csv = "\n".join([",".join(names)] + [",".join(map(str, row)) for row in answers]).encode()
    ds = upload(server, csv, "pool60.csv")
    started = time.perf_counter()
    open_dataset(page, server, ds["id"], view="loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    timings.setdefault("page_load_60_items_ms", []).append(round((time.perf_counter() - started) * 1000, 1))
    timings.setdefault("page_load_60_items_in_page_ms", []).append(
        round(page.evaluate("window.scalewright.timings.firstFitMs"), 1))
    # drop on the board, then time undo/redo clicks on the loadings view until the heatmap is redrawn
    page.click("#tab-board")
    before = fitted_marker(page)
    page.click('tr[data-item="P07"] button.toggle')
    wait_refit(page, before)
    page.click("#tab-loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    for button in ("#undo", "#redo", "#undo", "#redo"):
        marker = page.get_attribute("#heatmap", "data-rendered")
        started = time.perf_counter()
        page.click(button)
        wait_js(page, "m => { const el = document.querySelector('#heatmap');"
                      " return el && el.dataset.rendered && el.dataset.rendered !== m; }", marker)
        timings.setdefault("click_to_updated_heatmap_60_items_ms", []).append(
            round((time.perf_counter() - started) * 1000, 1))
    assert js_state(page, "s.dropped") == ["P07"]


def test_click_a_heatmap_row_to_drop_that_item(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    first_row = page.evaluate("[...document.querySelectorAll('#heatmap .heat-label')]"
                              ".sort((a, b) => a.getBoundingClientRect().top - b.getBoundingClientRect().top)[0]"
                              ".textContent").replace("⚑", "").split(" · ")[0].strip()  # label: "name · construct"
    n_rows = page.locator("#heatmap .heat-label").count()
    box = page.locator("#heatmap .heat-cells").bounding_box()
    n_factors = page.locator("#heatmap .heat-factor").count()
    # the top row, first factor
    page.mouse.click(box["x"] + box["width"] / n_factors / 2, box["y"] + box["height"] / n_rows / 2)
    page.wait_for_selector("#pick-drop")
    assert first_row in page.inner_text("#pick-bar")
    before = fitted_marker(page)
    page.click("#pick-drop")
    wait_refit(page, before)
    assert js_state(page, "s.dropped") == [first_row]
    assert first_row not in js_state(page, "Object.keys(s.analysis.efa.loadings)")


def test_a_bad_file_gets_a_plain_message_on_the_start_page(page, server, tmp_path):
    bad = tmp_path / "one_column.csv"
    bad.write_text("Q1\n1\n2\n3\n4\n")
    page.goto(server + "/")
    page.wait_for_selector("#file-responses")
    page.set_input_files("#file-responses", str(bad))
    page.click("#upload-button")
    page.wait_for_selector("#view .error[role=alert]")
    message = page.inner_text("#view .error[role=alert]")
    expected = httpx.post(f"{server}/api/datasets", files={"file": ("one_column.csv", bad.read_bytes(), "text/csv")})
    assert expected.status_code == 422
    assert message == expected.json()["error"]["message"]  # the server's own words, naming the file
    assert "one_column.csv" in message
    assert page.errors == []


def test_dropping_too_many_items_says_why_instead_of_breaking(page, server, demo):
    keep = ["W1", "W2"]
    drop = ",".join(it["name"] for it in demo["items"] if it["name"] not in keep)
    open_dataset(page, server, demo["id"], view="board", extra=f"&drop={drop}")
    assert js_state(page, "s.analysis.items.map(i => i.name)") == keep
    before = fitted_marker(page)
    page.click('tr[data-item="W2"] button.toggle')  # one item left: the server refuses with a 4xx
    wait_refit(page, before)
    assert page.locator("#summary .error[role=alert]").count() == 1
    assert page.errors == []
    before = fitted_marker(page)
    page.keyboard.press("Control+z")
    wait_refit(page, before)
    assert page.locator("#summary .error").count() == 0


def test_item_names_with_commas_survive_the_url(page, server, browser):
    rng = np.random.default_rng(11)
    base = rng.standard_normal((60, 1))
    answers = np.clip(np.round(base + rng.standard_normal((60, 5)) * 0.8 + 3), 1, 5).astype(int)
    names = ['"A,1"', "B%2C", "C 3", "D", "E"]
    csv = "\n".join([",".join(names)] + [",".join(map(str, row)) for row in answers]).encode()
    ds = upload(server, csv, "odd_names.csv")
    assert [it["name"] for it in ds["items"]][:2] == ["A,1", "B%2C"]
    open_dataset(page, server, ds["id"], view="board")
    for item in ("A,1", "B%2C"):
        before = fitted_marker(page)
        row = page.locator("#item-board tbody tr", has=page.locator("th.name", has_text=item))
        row.locator("button.toggle").click()
        wait_refit(page, before)
    assert js_state(page, "s.dropped") == ["A,1", "B%2C"]
    other = browser.new_context().new_page()
    try:
        other.goto(page.url)
        wait_until_fitted(other)
        assert js_state(other, "s.dropped") == ["A,1", "B%2C"]
        assert js_state(other, "s.analysis.items.map(i => i.name)") == ["C 3", "D", "E"]
    finally:
        other.context.close()


def test_the_start_page_opens_the_invented_demo(page, server):
    page.goto(server + "/")
    page.click("#open-demo")
    wait_until_fitted(page)
    assert "Workshop belonging (demo, wave 1)" in page.inner_text("body")  # server/demo.py DEMO_NAME
    assert page.locator("#heatmap, .board, table").count() > 0
    assert not page.errors


def test_parallel_forms_and_the_example_rater_table(page, server, demo, retest_wave):
    open_dataset(page, server, demo["id"], view="stability")
    page.select_option("#wave-first", demo["id"])
    page.select_option("#wave-second", retest_wave["id"])
    # pair each welcome item with the next one in the second wave: a parallel-forms comparison
    page.select_option("#retest-items", "current")
    kept = js_state(page, "s.meta.items.map((it) => it.name)")
    page.fill("#items-second", ", ".join(kept[1:] + kept[:1]))
    page.click("#run-retest")
    page.wait_for_selector("table.icc")
    assert " / " in page.text_content("#retest-result details")  # per-item rows name both forms' items
    page.click("#ratings-example")
    wait_js(page, "() => document.querySelector('#ratings-text').value.length > 100")
    page.click("#run-agreement")
    page.wait_for_selector("table.agreement")
    assert "Krippendorff" in page.inner_text("#agreement-result")
    assert not page.errors


def test_a_snapshot_can_include_the_retest_result(page, server, demo, retest_wave):
    open_dataset(page, server, demo["id"], view="stability")
    page.select_option("#wave-first", demo["id"])
    page.select_option("#wave-second", retest_wave["id"])
    page.fill("#items-second", "")
    page.click("#run-retest")
    page.wait_for_selector("table.icc")
    shown = page.inner_text("#retest-reading")
    page.click("#save-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    assert page.is_checked("#snap-include-retest")
    page.fill("#snap-name", "With the six-week retest")
    page.click("#snap-save")
    page.wait_for_selector("table.snapshots")
    snaps = httpx.get(f"{server}/api/datasets/{demo['id']}/snapshots").json()
    mine = next(s for s in snaps if s["name"] == "With the six-week retest")
    full = httpx.get(f"{server}/api/snapshots/{mine['id']}").json()
    icc = full["stability"]["retest"]["icc"]["ICC(A,1)"]["value"]
    assert f"{icc:.3f}".lstrip("0") in shown  # the number the page showed is the one the snapshot keeps
    report = httpx.get(f"{server}/api/snapshots/{mine['id']}/report").text
    assert "Stability and agreement" in report
    assert not page.errors
