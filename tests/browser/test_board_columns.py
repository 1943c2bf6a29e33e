"""The item board's loading columns, its row button and the negative item-rest r mark (issue 12)."""
from __future__ import annotations

import pytest

from .helpers import fitted_marker, js_state, open_dataset, wait_js, wait_refit

pytestmark = pytest.mark.browser

BOARD_ROWS = "[...document.querySelectorAll('#item-board tbody tr')].map(r => r.dataset.item)"


def _two(v: float) -> str:
    """The board's two-digit number style (.62, -.03)."""
    return f"{v:.2f}".replace("0.", ".", 1)


def _cell(page, item: str, css: str) -> str:
    return page.locator(f"#item-board tr[data-item='{item}'] td.{css}").inner_text()


def test_board_shows_the_loading_columns_and_sorts_by_the_primary_loading(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    efa = js_state(page, "s.analysis.efa")
    factors = efa["factors"]
    for item in ("W2", "W8", "C1"):
        row = efa["loadings"][item]
        j = max(range(len(row)), key=lambda k: abs(row[k]))
        assert _cell(page, item, "primary-factor").endswith(f"{_two(row[j])} {factors[j]}")
        construct = item[0]
        own = {"W": "welcome", "C": "contribution", "O": "ownership"}[construct]
        assert _cell(page, item, "own-loading") == _two(row[factors.index(own)])
    # W8 is written for welcome but loads on ownership (demo_data/README): marked by a symbol and a title
    assert "mismatch" in page.get_attribute("#item-board tr[data-item='W8'] td.primary-factor", "class")
    assert _cell(page, "W8", "primary-factor").startswith("≠ ")
    title = page.get_attribute("#item-board tr[data-item='W8'] td.primary-factor", "title")
    assert "not on its own construct “welcome”" in title
    assert "≠" not in _cell(page, "W2", "primary-factor")
    # the closest other subscale on the whole-pool board, from the item's own construct block
    r_other = js_state(page, "s.analysis.constructs.welcome.item_table.find(r => r.name === 'W1').r_other")
    group, best = max(r_other.items(), key=lambda kv: kv[1])
    assert _cell(page, "W1", "r-other").endswith(f"{_two(best)} {group}")

    page.click("#item-board thead button:has-text('Primary factor')")
    wait_js(page, "() => window.scalewright.state.sort.key === 'primary_loading'")
    names = page.evaluate(BOARD_ROWS)
    values = [efa["loadings"][n][max(range(len(factors)), key=lambda k: abs(efa["loadings"][n][k]))] for n in names]
    assert values == sorted(values, reverse=True)  # first click: largest first
    shown = page.eval_on_selector_all("#item-board td.primary-factor", "cs => cs.map(c => c.textContent)")
    assert [s.replace("≠ ", "").split(" ")[0] for s in shown] == [_two(v) for v in values]
    page.click("#item-board thead button:has-text('Primary factor')")
    wait_js(page, "() => window.scalewright.state.sort.dir === 1")
    again = page.evaluate(BOARD_ROWS)
    values = [efa["loadings"][n][max(range(len(factors)), key=lambda k: abs(efa["loadings"][n][k]))] for n in again]
    assert values == sorted(values) and again[0] == names[-1]  # second click: smallest first
    assert page.errors == []


def test_a_dropped_item_keeps_its_place_when_sorted_by_its_loading(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    page.click("#item-board thead button:has-text('Own-construct loading')")
    wait_js(page, "() => window.scalewright.state.sort.key === 'own_loading'")
    names = page.evaluate(BOARD_ROWS)
    middle = names[len(names) // 2]
    last = js_state(page, f"s.lastRows['{middle}'].own_loading")
    assert last is not None
    before = fitted_marker(page)
    page.click(f"tr[data-item='{middle}'] button.toggle")
    wait_refit(page, before)
    after = page.evaluate(BOARD_ROWS)
    # every other row sorts by its new loading, the dropped one by the loading it had when last active
    values = js_state(page, f"{after!r}.map(n => s.lastRows[n].own_loading ?? -Infinity)")
    assert js_state(page, f"s.lastRows['{middle}'].own_loading") == last
    assert values == sorted(values, reverse=True)
    assert after.index(middle) not in (len(after) - 1,) and abs(after.index(middle) - names.index(middle)) <= 2
    assert page.errors == []


def test_row_button_says_what_a_click_does(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    button = page.locator("tr[data-item='C7'] button.toggle")
    assert button.inner_text() == "Drop"  # a kept item: the click drops it (it read "keep" before)
    assert button.get_attribute("aria-label") == "Drop C7"
    assert page.locator("tr[data-item='C7'] .state-word").count() == 0
    before = fitted_marker(page)
    button.click()
    wait_refit(page, before)
    assert js_state(page, "s.dropped") == ["C7"]
    assert button.inner_text() == "Restore"
    # the state in words, not only the pattern
    assert "dropped" in page.locator("tr[data-item='C7'] th.name").inner_text()
    before = fitted_marker(page)
    button.click()
    wait_refit(page, before)
    assert js_state(page, "s.dropped") == []
    assert button.inner_text() == "Drop"
    assert page.errors == []


def test_a_negative_item_rest_r_is_marked_in_words_and_symbol(page, server, demo):
    # C3 is reverse-keyed (demo_data/README); scored as answered (rev= empty) its item-rest r is negative
    open_dataset(page, server, demo["id"], view="board", extra="&rev=")
    r = js_state(page, "s.analysis.items.find(i => i.name === 'C3').item_rest_r")
    assert r < 0
    cell = page.locator("#item-board tr[data-item='C3'] td.item-rest")
    assert "negative" in cell.get_attribute("class")
    assert cell.inner_text() == f"▼ {_two(r)}"
    assert cell.get_attribute("title").startswith("negative: the item runs against the rest")
    positive = page.locator("#item-board tr[data-item='C1'] td.item-rest")
    assert "negative" not in positive.get_attribute("class") and "▼" not in positive.inner_text()
    assert page.errors == []
