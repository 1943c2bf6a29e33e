"""The correlation view in the browser: grouped by construct, a pair's wording side by side, residuals.

Source: demo_data/README.md (three constructs of eight items in the codebook: welcome W1-W8, contribution C1-C8,
ownership O1-O8; W2 and W3 are near-duplicates sharing variance beyond their factor).
"""
from __future__ import annotations

import pytest

from .axe import serious_violations
from .helpers import fitted_marker, js_state, open_dataset, wait_js, wait_refit

pytestmark = pytest.mark.browser

CHART_X = "() => { const c = document.getElementById('corr-chart'); return c && c.data ? c.data[0].x : null; }"


def _wait_chart(page, rendered: int = 0):
    wait_js(page, "n => { const c = document.getElementById('corr-chart'); "
                  "return c && Number(c.dataset.rendered || 0) > n; }", rendered)
    return int(page.evaluate("Number(document.getElementById('corr-chart').dataset.rendered)"))


def test_correlation_view_groups_by_construct_and_shows_a_pair(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    page.click("#tab-correlations")
    _wait_chart(page)
    x = page.evaluate(CHART_X)
    # demo_data/README.md: the codebook's constructs, in pool order, each item under its own construct
    assert x == [f"W{i}" for i in range(1, 9)] + [f"C{i}" for i in range(1, 9)] + [f"O{i}" for i in range(1, 9)]
    names = page.evaluate("Array.from(document.getElementById('corr-chart').layout.annotations)"
                          ".map(a => a.text)")
    assert names == ["<b>welcome</b>", "<b>contribution</b>", "<b>ownership</b>"]
    # hover text carries both items' wording
    hover = page.evaluate("document.getElementById('corr-chart').data[0].hovertext[1][2]")
    assert "make me feel welcome." in hover and "make me feel welcomed." in hover and "r = ." in hover
    # plotly reads hover text as HTML: W4's "Staff & volunteers" arrives escaped (demo_data codebook)
    assert "Staff &amp; volunteers" in page.evaluate("document.getElementById('corr-chart').data[0].hovertext[3][0]")

    # keyboard: the cursor moves with the arrows and its pair is announced; Enter opens the pair
    page.focus("#corr-grid")
    page.keyboard.press("ArrowDown")
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowDown")  # row 2 (W3), column 2... then column 2 = W3: move left once for W2
    page.keyboard.press("ArrowLeft")
    said = page.inner_text("#corr-cursor-text")
    assert said.startswith("W3") and "W2" in said and "People at the workshop make me feel welcome." in said
    page.keyboard.press("Enter")
    page.wait_for_selector("#corr-pair .corr-item")
    sides = page.locator("#corr-pair .corr-item")
    assert sides.count() == 2
    assert "The people at the workshop make me feel welcomed." in sides.nth(0).inner_text()  # W3's wording
    assert "People at the workshop make me feel welcome." in sides.nth(1).inner_text()  # W2's wording
    assert "item-rest r" in sides.nth(0).inner_text() and "primary loading" in sides.nth(0).inner_text()

    # clicking a cell opens that pair (plotly's click on the cell W1 x C1)
    page.evaluate("() => { const c = document.getElementById('corr-chart'); "
                  "c.emit('plotly_click', {points: [{pointIndex: [0, 8]}]}); }")
    wait_js(page, "() => document.querySelector('#corr-pair h3')?.textContent.includes('W1 with C1')")
    assert "Other members ask for my help" in page.inner_text("#corr-pair")
    # the pair's Drop button drops that item: it leaves the matrix after the refit
    before = fitted_marker(page)
    page.click("#corr-drop-C1")
    wait_refit(page, before)
    wait_js(page, CHART_X.replace("c.data[0].x", "c.data[0].x.length === 23 && !c.data[0].x.includes('C1')"))
    assert js_state(page, "s.dropped") == ["C1"]
    assert page.locator("#corr-pair .corr-item").count() == 0  # the pair is gone with its item
    assert page.errors == []


def test_residual_toggle_marks_and_lists_large_residuals(page, server, demo):
    open_dataset(page, server, demo["id"], view="correlations")
    before = _wait_chart(page)
    page.click("#corr-show-residuals")
    page.wait_for_selector("#corr-large li button")
    _wait_chart(page, before)
    assert page.get_attribute("#corr-show-residuals", "aria-pressed") == "true"
    assert "after the 3-factor oblimin minres solution" in page.inner_text("#corr-basis")
    assert js_state(page, "s.corr.residuals && s.corr.residuals.answer.items.length") == 24
    first = page.locator("#corr-large li button").first
    assert first.get_attribute("data-pair") == "W2,W3"  # demo_data/README.md: the planted near-duplicates
    assert "◆" in first.inner_text()
    # the large cell carries the symbol in the chart (not colour alone)
    cell = page.evaluate("document.getElementById('corr-chart').data[0].text[1][2]")
    assert cell.startswith("◆")
    assert page.evaluate("document.getElementById('corr-chart').data[0].colorbar.title.text") == "residual"
    first.click()
    page.wait_for_selector("#corr-pair .corr-item")
    assert "residual ." in page.inner_text("#corr-pair h3") and "large residual" in page.inner_text("#corr-pair h3")
    # back to correlations: no residual marks
    page.click("#corr-show-r")
    wait_js(page, "() => document.getElementById('corr-chart').data[0].colorbar.title.text === 'r'")
    assert page.locator("#corr-large").count() == 0
    assert page.errors == []


def test_axe_finds_no_serious_violation_on_the_residual_view(browser, server, demo):
    context = browser.new_context(viewport={"width": 1400, "height": 900}, bypass_csp=True)  # to inject axe-core
    try:
        page = context.new_page()
        open_dataset(page, server, demo["id"], view="correlations")
        page.click("#corr-show-residuals")
        page.click("#corr-large li button >> nth=0")
        page.wait_for_selector("#corr-pair .corr-item")
        _wait_chart(page)
        found = serious_violations(page)
        assert found == "", "axe-core, correlation view (residuals, a pair open):\n" + found
    finally:
        context.close()
