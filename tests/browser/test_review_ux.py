"""Things a team ran into while using the dashboard, each checked in a real browser after its fix.

- On a board sorted by a statistic, a dropped row jumped to the end and took the keyboard focus with it,
  so "D, down, D" skipped items; it now keeps its place.
- Changing a setting with the keyboard threw the focus out of the control (the form was redrawn twice).
- Teammates read "Bo: W1" or "n_factors: 4"; they now read "Bo dropped W1", "set number of factors to 4".
- The "follow the team" offer stayed up after the page had reached the team's state.
- Chart axis titles overlapped their tick labels at projector size; the scree started at a "factor 0".
- A refused upload emptied the form and showed raw JSON details.
- The coefficients in the header broke over two lines at 1440 px as soon as the change marks appeared.
"""
from __future__ import annotations

import pytest

from .conftest import DEMO
from .helpers import fitted_marker, js_state, open_dataset, upload, wait_js, wait_refit

pytestmark = pytest.mark.browser


def board_order(page) -> list[str]:
    return page.evaluate("[...document.querySelectorAll('#item-board tbody tr')].map(t => t.dataset.item)")


def fresh_demo(server) -> dict:
    """A dataset of its own, so live messages from other tests do not reach it."""
    return upload(server, (DEMO / "workshop_responses.csv").read_bytes(), "workshop_responses.csv",
                  (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")


def test_keyboard_drops_on_a_sorted_board_keep_rows_in_place(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    page.click("#item-board thead button:has-text('Item-rest r')")  # lowest first
    order = board_order(page)
    first, second = order[0], order[1]
    page.focus(f'tr[data-item="{first}"]')
    before = fitted_marker(page)
    page.keyboard.press("d")
    wait_refit(page, before)
    assert board_order(page)[0] == first  # the dropped row stays where the team was looking
    assert page.evaluate("document.activeElement.dataset.item") == first
    page.keyboard.press("ArrowDown")
    assert page.evaluate("document.activeElement.dataset.item") == second
    before = fitted_marker(page)
    page.keyboard.press("d")
    wait_refit(page, before)
    assert js_state(page, "s.dropped") == [first, second]
    assert board_order(page)[:2] == [first, second]
    assert page.errors == []


def test_settings_keep_the_keyboard_focus_through_a_refit(page, server, demo):
    open_dataset(page, server, demo["id"], view="settings")
    page.focus("#set-rotation")
    before = fitted_marker(page)
    page.select_option("#set-rotation", "promax")
    wait_refit(page, before)
    assert page.evaluate("document.activeElement.id") == "set-rotation"
    page.fill("#th-primary_min", "0.5")
    before = fitted_marker(page)
    page.keyboard.press("Tab")  # leaves the field: the change is applied and the focus moves on
    wait_refit(page, before)
    assert js_state(page, "s.thresholds") == {"primary_min": 0.5}
    assert page.evaluate("document.activeElement.id") == "th-communality_min"
    assert "default 0.4" in page.inner_text("label.threshold.changed")  # Howard (2016) .40, as in settings.js
    assert page.errors == []


def test_teammates_read_what_happened_in_words(page, server, browser):
    ds = fresh_demo(server)
    open_dataset(page, server, ds["id"], view="board")
    second = browser.new_context(viewport={"width": 1024, "height": 768}).new_page()
    try:
        open_dataset(second, server, ds["id"], view="board")
        for p in (page, second):
            wait_js(p, "() => document.body.dataset.live === 'on'", None, 10_000)
        page.fill("#who", "Bo")
        page.dispatch_event("#who", "change")
        before = fitted_marker(second)
        page.click('tr[data-item="W1"] button.toggle')
        wait_refit(second, before)
        wait_js(second, "() => document.querySelector('#feed').textContent.includes('Bo dropped W1')", None, 5000)
        page.click("#tab-factors")
        page.wait_for_selector("#n-factors")
        before = fitted_marker(second)
        page.select_option("#n-factors", "4")
        wait_refit(second, before)
        wait_js(second, "() => document.querySelector('#feed').textContent.includes('Bo set number of factors to 4')",
                None, 5000)
        assert "n_factors" not in second.inner_text("#feed")
    finally:
        second.context.close()

    # A page that joins late is offered the team's state; once it has the same state, the offer goes away.
    late = browser.new_context(viewport={"width": 1200, "height": 800}).new_page()
    try:
        open_dataset(late, server, ds["id"], view="board")
        late.wait_for_selector("#follow-team")
        assert "last change: set number of factors to 4" in late.inner_text("#follow")
        before = fitted_marker(late)
        late.click('tr[data-item="W1"] button.toggle')
        wait_refit(late, before)
        assert late.locator("#follow").is_visible()  # W1 alone is not yet the team's state (4 factors)
        late.click("#tab-factors")
        late.wait_for_selector("#n-factors")
        before = fitted_marker(late)
        late.select_option("#n-factors", "4")
        wait_refit(late, before)
        assert not late.locator("#follow").is_visible()
    finally:
        late.context.close()


def test_chart_axes_have_room_at_projector_size(page, server, demo):
    open_dataset(page, server, demo["id"], view="factors")
    page.click("#projector")
    page.wait_for_selector("#map .ytitle")
    wait_js(page, "() => document.querySelector('#scree .xtick') !== null", None, 10_000)
    for chart in ("#map", "#scree"):
        title = page.locator(f"{chart} .ytitle").bounding_box()
        ticks = [page.locator(f"{chart} .ytick text").nth(i).bounding_box()
                 for i in range(page.locator(f"{chart} .ytick text").count())]
        right_of_title = title["x"] + title["width"]
        assert all(t["x"] >= right_of_title for t in ticks if t), chart  # the title stands clear of the numbers
    first_tick = page.locator("#scree .xtick text").first.text_content()
    assert first_tick == "1"  # factors are counted from 1; there is no factor 0
    page.click("#projector")
    assert page.errors == []


def test_a_refused_upload_keeps_the_form_and_speaks_plainly(page, server, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b\nhello,world\nfoo,\n")
    page.goto(server + "/")
    page.wait_for_selector("#file-responses")
    page.set_input_files("#file-responses", str(bad))
    page.fill("#missing-codes", "-9")
    page.click("#upload-button")
    page.wait_for_selector("#upload-error")
    assert "bad.csv" in page.inner_text("#upload-error .error")  # the message names the file
    assert "[" not in page.inner_text("#upload-error summary")  # no raw JSON on show
    assert page.evaluate("document.querySelector('#file-responses').files[0].name") == "bad.csv"
    assert page.input_value("#missing-codes") == "-9"
    # the team picks the right files and reads again without re-typing the missing codes
    page.set_input_files("#file-responses", str(DEMO / "workshop_responses.csv"))
    page.set_input_files("#file-codebook", str(DEMO / "workshop_codebook.csv"))
    page.fill("#id-column", "respondent")
    page.click("#upload-button")
    page.wait_for_selector("table.preview")
    assert "marked 40 cells as missing" in page.inner_text("#view")  # demo_data: -9 codes 40 answers
    assert page.errors == []


def test_the_header_coefficients_stay_on_one_line(browser, server, demo):
    context = browser.new_context(viewport={"width": 1440, "height": 1000})
    page = context.new_page()
    try:
        open_dataset(page, server, demo["id"], view="board")
        before = fitted_marker(page)
        page.click('tr[data-item="C7"] button.toggle')  # a drop adds the change marks
        wait_refit(page, before)
        assert page.locator("#summary .delta").count() >= 1
        tops = page.evaluate("[...document.querySelectorAll('#summary .stat')]"
                             ".map(e => Math.round(e.getBoundingClientRect().top))")
        assert len(tops) == 7 and len(set(tops)) == 1  # alpha, CI, omega, omega h, items, factors, KMO
    finally:
        context.close()


def test_picking_a_heatmap_row_does_not_move_the_chart(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    top_before = page.locator("#heatmap").bounding_box()["y"]
    box = page.locator("#heatmap .heat-cells").bounding_box()
    n_rows = page.locator("#heatmap .heat-label").count()
    page.mouse.click(box["x"] + box["width"] / 6, box["y"] + box["height"] / n_rows * 1.5)  # second row
    page.wait_for_selector("#pick-drop")
    assert page.locator("#heatmap").bounding_box()["y"] == top_before  # the next click lands where aimed
    assert page.locator("#pick-drop").is_visible()
    # the hover box breaks long wording into lines and stays inside the chart, at its left and at its right edge
    heat = page.locator("#heatmap").bounding_box()
    for x in (box["x"] + 4, box["x"] + box["width"] - 4):
        page.mouse.move(x, box["y"] + box["height"] / n_rows / 2)
        wait_js(page, "() => !document.querySelector('#heatmap .heat-tip').hidden", None, 5000)
        tip = page.locator("#heatmap .heat-tip").bounding_box()
        assert heat["x"] <= tip["x"] and tip["x"] + tip["width"] <= heat["x"] + heat["width"], (x, tip, heat)
    assert page.errors == []


def test_a_retest_result_says_when_the_kept_items_changed(page, server, demo):
    wave2 = upload(server, (DEMO / "workshop_retest.csv").read_bytes(), "workshop_retest.csv",
                   (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")
    open_dataset(page, server, demo["id"], view="stability")
    page.select_option("#wave-first", demo["id"])
    page.select_option("#wave-second", wave2["id"])
    page.click("#run-retest")
    page.wait_for_selector("table.icc")
    assert "24 (sum score)" in page.inner_text("#retest-result")  # the items behind the numbers are named
    assert page.locator("#retest-result .stale").count() == 0
    page.click("#tab-board")
    before = fitted_marker(page)
    page.click('tr[data-item="C7"] button.toggle')
    wait_refit(page, before)
    page.click("#tab-stability")
    page.wait_for_selector("#retest-result .stale")
    assert "compare the waves again" in page.inner_text("#retest-result .stale")
    assert page.errors == []


def test_the_second_wave_defaults_to_another_file(page, server, demo):
    """A copy of the same file (the demo uploaded twice) is never offered as the second wave."""
    copy = fresh_demo(server)
    wave2 = upload(server, (DEMO / "workshop_retest.csv").read_bytes(), "workshop_retest.csv",
                   (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")
    newest = fresh_demo(server)  # listed first (newest first), and the same bytes as `copy`
    assert newest["sha256"] == copy["sha256"] != wave2["sha256"]
    open_dataset(page, server, copy["id"], view="stability")
    page.wait_for_selector("#wave-second")
    assert page.input_value("#wave-first") == copy["id"]
    second = page.input_value("#wave-second")
    assert second != newest["id"] and second != copy["id"]
    sha = page.evaluate("id => window.scalewright.state.datasets.find(d => d.id === id).sha256", second)
    assert sha != copy["sha256"]


def test_a_tab_opened_with_the_keyboard_keeps_the_focus(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    page.focus("#tab-settings")
    page.keyboard.press("Enter")
    page.wait_for_selector("#set-correlation")
    assert page.evaluate("document.activeElement.id") == "tab-settings"  # not thrown back to the page start
    page.keyboard.press("ArrowRight")
    assert page.evaluate("document.activeElement.id") == "tab-snapshots"


@pytest.mark.parametrize("projector", [False, True])
def test_no_view_is_wider_than_a_laptop_screen(browser, server, demo, projector):
    context = browser.new_context(viewport={"width": 1024, "height": 768})
    page = context.new_page()
    try:
        page.goto(server + "/")
        page.evaluate(f"localStorage.setItem('scalewright.projector', '{1 if projector else 0}')")
        open_dataset(page, server, demo["id"], view="board", extra="&drop=C7")
        for view in ("board", "loadings", "alpha", "factors", "settings", "snapshots", "stability"):
            page.click(f"#tab-{view}")
            page.wait_for_timeout(400)  # let the charts draw
            width = page.evaluate("document.documentElement.scrollWidth")
            assert width <= 1024, f"{view}: the page is {width} px wide"
    finally:
        context.close()
