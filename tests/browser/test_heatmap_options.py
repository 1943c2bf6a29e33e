"""Loadings heatmap options (issue 12): a cut-off that blanks small loadings (kept in the hover), pool order,
the codebook construct beside each row, and keyboard row selection that opens the pick bar."""
from __future__ import annotations

import httpx
import pytest

from .helpers import js_state, open_dataset, wait_js

pytestmark = pytest.mark.browser

# the drawn rows: their labels, the values printed in their cells, and each row's loadings from the analysis
TRACE = ("(() => { const el = document.getElementById('heatmap'); const s = window.scalewright.state;"
         " const y = [...el.querySelectorAll('.heat-label')].map((t) => t.textContent);"
         " const k = el.querySelectorAll('.heat-factor').length;"
         " const cells = [...el.querySelectorAll('.heat-value')].map((t) => t.textContent);"
         " const z = y.map((l) => s.analysis.efa.loadings[l.replace('⚑ ', '').split(' · ')[0]]);"
         " return {y, z, k, text: y.map((_, i) => cells.slice(i * k, i * k + k))}; })()")


def _rendered(page, before: str | None = None):
    wait_js(page, "m => { const el = document.querySelector('#heatmap'); return el && el.dataset.rendered "
                  "&& el.dataset.rendered !== m && el.querySelector('svg .heat-cell'); }", before or "")


def test_cutoff_blanks_small_loadings_but_the_hover_keeps_them(page, server, demo):
    served = {o["name"]: o["default"] for o in httpx.get(f"{server}/api/options", timeout=10).json()["display"]}
    cut = served["loading_cutoff"]
    open_dataset(page, server, demo["id"], view="loadings")
    _rendered(page)
    assert float(page.input_value("#loading-cutoff")) == pytest.approx(cut)
    t = page.evaluate(TRACE)
    small = [(i, j) for i, row in enumerate(t["z"]) for j, v in enumerate(row) if abs(v) < cut]
    large = [(i, j) for i, row in enumerate(t["z"]) for j, v in enumerate(row) if abs(v) >= cut]
    assert small and large
    assert all(t["text"][i][j] == "" for i, j in small)
    assert all(t["text"][i][j] == f"{t['z'][i][j]:.2f}".replace("0.", ".", 1) for i, j in large)
    # the hover reads the full value, not the blanked text
    i, j = small[0]
    page.locator("#heatmap .heat-cell").nth(i * t["k"] + j).hover()
    wait_js(page, "() => !document.querySelector('#heatmap .heat-tip').hidden", None, 5000)
    assert page.inner_text("#heatmap .heat-tip strong").endswith(f": {t['z'][i][j]:.3f}")
    assert "cut=" not in page.url  # the default stays out of the URL

    marker = page.get_attribute("#heatmap", "data-rendered")
    page.fill("#loading-cutoff", "0")
    page.dispatch_event("#loading-cutoff", "change")
    _rendered(page, marker)
    assert "cut=0" in page.url
    t = page.evaluate(TRACE)
    assert all(cell != "" for row in t["text"] for cell in row)  # 0 shows every loading

    # the choice is read back from the URL
    page.goto(page.url.replace("cut=0", "cut=0.5"))
    wait_js(page, "() => document.body.dataset.fitted")
    _rendered(page)
    assert js_state(page, "s.heat.cutoff") == 0.5
    t = page.evaluate(TRACE)
    assert all((t["text"][i][j] == "") == (abs(v) < 0.5) for i, row in enumerate(t["z"]) for j, v in enumerate(row))
    assert page.errors == []


def test_pool_order_and_construct_marks(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    _rendered(page)
    by_factor = [y.replace("⚑ ", "") for y in page.evaluate(TRACE)["y"]]
    pool = [it["name"] for it in demo["items"]]
    constructs = {it["name"]: it["construct"] for it in demo["items"]}
    names = [y.split(" · ")[0] for y in by_factor]
    assert names != pool  # grouped by factor
    # each row carries its codebook construct; W8 (written for welcome, loads on ownership) is marked
    for y in by_factor:
        name, mark = y.split(" · ")
        assert mark.rstrip(" ≠") == constructs[name]
    assert "W8 · welcome ≠" in by_factor
    assert "W2 · welcome" in by_factor

    marker = page.get_attribute("#heatmap", "data-rendered")
    page.click("#heat-order-pool")
    _rendered(page, marker)
    assert "hord=pool" in page.url
    assert page.get_attribute("#heat-order-pool", "aria-pressed") == "true"
    assert [y.replace("⚑ ", "").split(" · ")[0] for y in page.evaluate(TRACE)["y"]] == pool
    marker = page.get_attribute("#heatmap", "data-rendered")
    page.click("#heat-order-factor")
    _rendered(page, marker)
    assert "hord" not in page.url
    assert [y.replace("⚑ ", "") for y in page.evaluate(TRACE)["y"]] == by_factor
    assert page.errors == []


def test_keyboard_selects_a_row_and_enter_opens_the_pick_bar(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    _rendered(page)
    first = page.evaluate(TRACE)["y"][0].replace("⚑ ", "").split(" · ")[0]
    second = page.evaluate(TRACE)["y"][1].replace("⚑ ", "").split(" · ")[0]
    page.focus("#heat-keys")
    page.keyboard.press("ArrowDown")
    wait_js(page, "n => window.scalewright.state.heat.row === n", first)
    line = page.inner_text("#heat-row")
    wording = next(it["text"] for it in demo["items"] if it["name"] == first)
    assert line.startswith(first) and wording in line and "Loadings:" in line
    assert page.get_attribute("#heat-row", "aria-live") == "polite"
    # the selected row is framed in the chart (a dashed rectangle, not a colour)
    wait_js(page, "() => document.querySelector('#heatmap .heat-frame')?.getAttribute('display') === 'inline'")
    frame = page.locator("#heatmap .heat-frame").bounding_box()
    label = page.locator("#heatmap .heat-label").first.bounding_box()
    assert frame["y"] <= label["y"] + label["height"] / 2 <= frame["y"] + frame["height"]  # around the first row
    assert page.get_attribute("#heatmap .heat-frame", "stroke-dasharray")  # dashed
    page.keyboard.press("ArrowDown")
    wait_js(page, "n => window.scalewright.state.heat.row === n", second)
    page.keyboard.press("ArrowUp")
    wait_js(page, "n => window.scalewright.state.heat.row === n", first)
    page.keyboard.press("Enter")
    page.wait_for_selector("#pick-drop")
    assert page.inner_text("#pick-drop") == f"Drop {first}"
    assert wording in page.inner_text("#pick-bar")  # the wording shown, not only on hover
    assert page.evaluate("document.activeElement.id") == "pick-drop"
    page.keyboard.press("Enter")  # drops it
    wait_js(page, "n => window.scalewright.state.dropped.includes(n)", first)
    assert page.errors == []
