"""Subscale evidence in the dashboard (issue 11): the subscale selector on the board and the alpha curves,
the omega family with its sentence, per-subscale reliability, retest per subscale, pairwise Cohen's kappa."""
from __future__ import annotations

import pytest

from .conftest import DEMO
from .helpers import js_state, open_dataset, upload, wait_js

pytestmark = pytest.mark.browser

BOARD_ROWS = "[...document.querySelectorAll('#item-board tbody tr')].map(r => r.dataset.item)"


def _cell(page, item: str, css: str) -> str:
    return page.locator(f"#item-board tr[data-item='{item}'] td.{css}").inner_text()


def test_subscale_selector_switches_the_board_and_the_alpha_curve(page, server, demo):
    open_dataset(page, server, demo["id"], view="board")
    assert "Whole-pool figures" in page.inner_text("#board-scope")
    pool_w1 = js_state(page, "s.analysis.items.find(i => i.name === 'W1')")
    assert _cell(page, "W1", "num >> nth=0") == f"{pool_w1['item_rest_r']:.2f}".replace("0.", ".")

    page.select_option("#subscale", "welcome")
    wait_js(page, "() => document.querySelector('#board-scope').classList.contains('subscale')")
    assert js_state(page, "s.subscale") == "welcome"
    assert "sub=welcome" in page.url  # the choice survives a reload or a link
    names = page.evaluate(BOARD_ROWS)
    assert names == [f"W{i}" for i in range(1, 9)]  # demo_data/README: W1-W8 are the welcome items
    row = js_state(page, "s.analysis.constructs.welcome.item_table.find(r => r.name === 'W1')")
    assert row["item_rest_r"] != pytest.approx(pool_w1["item_rest_r"], abs=1e-3)  # within the subscale, not the pool
    cells = page.locator("#item-board tr[data-item='W1'] td.num").all_inner_texts()
    assert cells[0] == f"{row['item_rest_r']:.2f}".replace("0.", ".")
    assert cells[1] == f"{row['alpha_if_deleted']:.3f}".replace("0.", ".")
    assert cells[2] == f"{row['omega_if_deleted']:.3f}".replace("0.", ".")
    group, best = max(row["r_other"].items(), key=lambda kv: kv[1])
    assert _cell(page, "W1", "r-other") == f"{best:.2f} {group}".replace("0.", ".", 1)

    # the alpha curves follow the same choice: the subscale's items and its own pruning path
    page.click("#tab-alpha")
    page.wait_for_selector("#alpha-curve[data-rendered]")
    assert page.input_value("#alpha-subscale") == "welcome"
    wait_js(page, "() => document.querySelector('#pruning-path .scatterlayer .trace')")
    ticks = page.eval_on_selector_all("#alpha-curve .xtick text", "t => t.map(x => x.textContent)")
    assert ticks == [f"W{i}" for i in range(1, 9)]
    path = js_state(page, "s.analysis.constructs.welcome.pruning_path")
    xs = page.evaluate("() => document.querySelector('#pruning-path').data[0].x")
    assert xs == [p["n_items"] for p in path]
    assert "within “welcome”" in page.inner_text("#pruning-path")
    page.select_option("#alpha-subscale", "")
    wait_js(page, "() => document.querySelector('#pruning-path').dataset.scope === ''")
    xs = page.evaluate("() => document.querySelector('#pruning-path').data[0].x")
    assert xs[0] == 24  # the whole pool again (demo: 24 items)
    assert page.errors == []


def test_omega_family_and_per_subscale_reliability_are_shown(page, server, demo):
    open_dataset(page, server, demo["id"], view="alpha")
    rel = js_state(page, "s.analysis.reliability")
    family = page.inner_text("#omega-family")
    assert rel["omega_basis"] == "schmid_leiman"  # the demo has three factors (demo_data/README)
    assert "ω hierarchical" in family and f"{rel['omega_hierarchical']:.3f}".replace("0.", ".") in family
    assert "ECV" in family and f"{rel['ecv']:.3f}".replace("0.", ".") in family
    assert f"{rel['omega_unidimensional']:.3f}".replace("0.", ".") in family
    assert page.inner_text("#omega-note") == rel["omega_note"]
    assert page.locator("table.omega-subscale tbody tr").count() == len(rel["omega_subscale"])
    sub = page.inner_text("#subscale-reliability")
    for name, block in js_state(page, "s.analysis.constructs").items():
        assert name in sub and f"{block['one_factor_fit']['rmsr']:.3f}".replace("0.", ".") in sub
    lr = js_state(page, "s.analysis.constructs.welcome.one_factor_fit.largest_residual")
    if abs(lr["r"]) >= 0.1:
        a, b = lr["items"]
        assert f"Items {a} and {b} share more than the single factor explains" in sub
    assert "ωh" in page.inner_text("#summary")
    assert page.errors == []


@pytest.fixture(scope="session")
def retest_wave2(server):
    return upload(server, (DEMO / "workshop_retest.csv").read_bytes(), "workshop_retest.csv",
                  (DEMO / "workshop_codebook.csv").read_bytes(), missing_codes="-9", id_column="respondent")


def test_retest_per_subscale_shows_one_table_per_construct(page, server, demo, retest_wave2):
    open_dataset(page, server, demo["id"], view="stability")
    page.select_option("#wave-first", demo["id"])
    page.select_option("#wave-second", retest_wave2["id"])
    page.check("#retest-by-construct-toggle")
    page.click("#run-retest")
    page.wait_for_selector("#retest-by-construct table.by-construct-table")
    blocks = js_state(page, "s.stability.retest.by_construct")
    assert sorted(blocks) == ["contribution", "ownership", "welcome"]  # the demo codebook's constructs
    tables = page.locator("#retest-by-construct table.by-construct-table")
    assert tables.count() == 3
    captions = tables.locator("caption").all_inner_texts()
    assert [c.split(" (")[0] for c in captions] == list(blocks)
    first = blocks[list(blocks)[0]]
    rec = first["recommended"]
    text = tables.first.inner_text()
    assert f"{first['icc'][rec]['value']:.3f}".replace("0.", ".") in text
    assert f"{first['sem']['value']:.2f}" in text
    assert js_state(page, "s.stability.retestAsked.by_construct") is True
    assert page.errors == []


def test_agreement_with_three_raters_shows_pairwise_cohen(page, server, demo):
    open_dataset(page, server, demo["id"], view="stability")
    page.click("#ratings-example")  # three coordinators (demo_data/README)
    wait_js(page, "() => document.querySelector('#ratings-text').value.length > 0")
    page.click("#run-agreement")
    page.wait_for_selector("table.pairwise-cohen")
    pc = js_state(page, "s.stability.agreement.pairwise_cohen")
    rows = page.locator("table.pairwise-cohen tbody tr")
    assert rows.count() == 3 + 1  # three pairs and their mean
    assert f"{pc['kappa']['mean']:.3f}".replace("0.", ".") in rows.last.inner_text()
    assert f"{pc['kappa']['pairs'][0]['kappa']:.3f}".replace("0.", ".") in rows.first.inner_text()
    assert page.errors == []


def test_new_warnings_show_where_their_items_are(page, server, demo):
    # five factors on the demo's three: a factor is left with fewer than three salient loadings
    open_dataset(page, server, demo["id"], view="board", extra="&nf=5")
    few = [w for w in js_state(page, "s.analysis.efa.warnings") if w["code"] == "factor_few_items" and w["items"]]
    assert few, "five factors on three should leave a factor with few items"
    for item in few[0]["items"]:
        chip = page.locator(f"#item-board tr[data-item='{item}'] .flag.warn.factor_few_items")
        assert chip.inner_text() == "factor has few items"
        assert chip.get_attribute("data-tip") == few[0]["message"]
    page.click("#tab-loadings")
    page.wait_for_selector("#heatmap[data-rendered]")
    labels = page.eval_on_selector_all("#heatmap .heat-label", "t => t.map(x => x.textContent)")
    # marked on its heatmap row (a label reads "name · construct")
    assert any(lab.split(" · ")[0] == f"⚑ {few[0]['items'][0]}" for lab in labels)
    assert page.errors == []


def test_degenerate_rotation_is_said_where_the_loadings_would_be(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings", extra="&gamma=1")  # oblimin gamma 1 (issue 11)
    box = page.wait_for_selector("#rotation-degenerate")
    warnings = js_state(page, "s.analysis.efa.warnings")
    message = next(w["message"] for w in warnings if w["code"] == "rotation_degenerate")
    assert message in box.inner_text() and "not shown" in box.inner_text()
    assert page.locator("#heatmap").count() == 0  # no loadings drawn
    assert page.errors == []
