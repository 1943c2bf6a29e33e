"""Readable on a projector (issue 12): axe-core finds no serious WCAG 2.0/2.1 A/AA violation on the meeting
views, text on the board is at least 12 px, the flag chips reach 4.5:1, and the alpha curve says in a
shape and a word, not only in colour, which items the scale is better without."""
from __future__ import annotations

import httpx
import pytest

from .axe import serious_violations
from .helpers import open_dataset, wait_js

pytestmark = pytest.mark.browser

# Every chart of the view has been drawn, by plotly or as the page's own SVG (or the view has none).
CHARTS_DRAWN = """() => {
  const view = document.querySelector('#view');
  if (!view || !view.children.length) return false;
  const charts = [...view.querySelectorAll('.chart')].filter((c) => c.offsetParent !== null);
  return charts.every((c) => c.querySelector('svg.main-svg, svg.heat-svg, svg.phi-svg') || c.textContent.trim());
}"""


def _open(page, server, dataset_id, view, extra=""):
    open_dataset(page, server, dataset_id, view=view, extra=extra)
    wait_js(page, CHARTS_DRAWN, timeout=30_000)


def _projector_on(page):
    page.click("#projector")
    wait_js(page, "() => document.documentElement.classList.contains('projector')")
    wait_js(page, CHARTS_DRAWN, timeout=30_000)


@pytest.mark.parametrize("projector", [False, True], ids=["normal", "projector"])
def test_axe_finds_no_serious_violation_on_the_board(axe_page, server, demo, projector):
    _open(axe_page, server, demo["id"], "board", extra="&drop=C7")  # a dropped row is styled apart
    axe_page.wait_for_selector("#item-board tbody tr.dropped")
    if projector:
        _projector_on(axe_page)
    found = serious_violations(axe_page)
    assert found == "", "axe-core, board" + (" (projector)" if projector else "") + ":\n" + found
    assert axe_page.errors == []


@pytest.mark.parametrize("view", ["loadings", "correlations", "alpha"])
def test_axe_finds_no_serious_violation_on_the_views(axe_page, server, demo, view):
    _open(axe_page, server, demo["id"], view)
    if view == "loadings":
        axe_page.wait_for_selector("#heatmap[data-rendered]")
    if view == "alpha":
        axe_page.wait_for_selector("#alpha-curve[data-rendered]")
    if view == "correlations":
        axe_page.wait_for_selector("#corr-chart[data-rendered]")
    found = serious_violations(axe_page)
    assert found == "", f"axe-core, {view} view:\n{found}"
    if view == "correlations":  # and with the residuals after the factor model
        axe_page.click("#corr-show-residuals")
        axe_page.wait_for_selector("#corr-show-residuals[aria-pressed='true']")
        wait_js(axe_page, "() => document.querySelector('#corr-basis')?.textContent.includes('residual')")
        found = serious_violations(axe_page)
        assert found == "", f"axe-core, correlations view (residuals):\n{found}"
    assert axe_page.errors == []


def test_axe_finds_no_serious_violation_on_the_start_page(axe_page, server):
    axe_page.goto(f"{server}/?v=start")
    axe_page.wait_for_selector("#file-responses", state="attached")
    found = serious_violations(axe_page)
    assert found == "", f"axe-core, start page:\n{found}"
    assert axe_page.errors == []


def test_axe_finds_no_serious_violation_in_the_snapshot_report(axe_page, server, demo):
    items = [it["name"] for it in demo["items"]]
    saved = httpx.post(f"{server}/api/datasets/{demo['id']}/snapshots",
                       json={"name": "Accessibility check", "items": items[1:],
                             "removed": [{"item": items[0], "reason": "checked by axe"}]}, timeout=60)
    assert saved.status_code == 201, saved.text
    axe_page.goto(f"{server}/api/snapshots/{saved.json()['id']}/report")
    axe_page.wait_for_selector("table")
    found = serious_violations(axe_page)
    assert found == "", f"axe-core, snapshot report:\n{found}"


# Computed font size of every visible element that holds text of its own (not only through children).
SMALL_TEXT = """() => {
  const out = [];
  for (const el of document.body.querySelectorAll('*')) {
    const own = [...el.childNodes].some((n) => n.nodeType === Node.TEXT_NODE && n.textContent.trim());
    if (!own) continue;
    const cs = getComputedStyle(el);
    if (cs.display === 'none' || cs.visibility === 'hidden' || !el.getClientRects().length) continue;
    if (el.closest('[hidden], dialog:not([open])')) continue;
    const px = parseFloat(cs.fontSize);
    if (px < 12) out.push(`${el.tagName.toLowerCase()}${el.id ? '#' + el.id : ''}.${[...el.classList].join('.')} `
                          + `${px}px "${el.textContent.trim().slice(0, 30)}"`);
  }
  return out;
}"""

# Text colour and background of each flag chip, as computed (rgb()/rgba() strings).
CHIP_COLOURS = """() => [...document.querySelectorAll('#item-board .flag')].map((f) => {
  const cs = getComputedStyle(f);
  return {kind: f.className, text: f.textContent, color: cs.color, background: cs.backgroundColor};
})"""


def _rgb(css: str) -> tuple[float, float, float]:
    parts = css[css.index("(") + 1:css.index(")")].replace("/", ",").split(",")
    r, g, b = (float(p) for p in parts[:3])
    assert len(parts) == 3 or float(parts[3]) == 1.0, f"semi-transparent colour {css}: blend it before comparing"
    return r, g, b


def _luminance(rgb: tuple[float, float, float]) -> float:
    # Relative luminance as defined in WCAG 2.1 (glossary "relative luminance", used by SC 1.4.3).
    lin = [c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in (v / 255 for v in rgb)]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def contrast_ratio(fg: str, bg: str) -> float:
    """(L1 + 0.05) / (L2 + 0.05), WCAG 2.1 glossary "contrast ratio"."""
    hi, lo = sorted((_luminance(_rgb(fg)), _luminance(_rgb(bg))), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_contrast_ratio_matches_the_wcag_definition():
    # WCAG 2.1 glossary "contrast ratio": black on white is 21:1, a colour on itself 1:1.
    assert contrast_ratio("rgb(0, 0, 0)", "rgb(255, 255, 255)") == pytest.approx(21.0)
    assert contrast_ratio("rgb(35, 96, 122)", "rgb(35, 96, 122)") == pytest.approx(1.0)
    # #767676 on white is the lightest grey that passes 4.5:1 (4.54:1)  # from memory
    assert contrast_ratio("rgb(118, 118, 118)", "rgb(255, 255, 255)") == pytest.approx(4.54, abs=0.01)


def test_board_text_is_at_least_12px_and_flag_chips_reach_4_5_to_1(page, server, demo):
    open_dataset(page, server, demo["id"], view="board", extra="&drop=C7")  # a dropped row is styled apart
    page.wait_for_selector("#item-board tbody tr.dropped")
    small = page.evaluate(SMALL_TEXT)
    assert small == [], "text under 12 px on the board:\n" + "\n".join(small)
    chips = page.evaluate(CHIP_COLOURS)
    assert chips, "the demo data has flagged items: the board should show flag chips"
    # WCAG 2.1 success criterion 1.4.3 (Contrast, Minimum, level AA): at least 4.5:1 for normal-size text.
    low = [f"{c['kind']} '{c['text']}': {contrast_ratio(c['color'], c['background']):.2f}:1"
           for c in chips if contrast_ratio(c["color"], c["background"]) < 4.5]
    assert low == [], "flag chips below 4.5:1 (WCAG 2.1 SC 1.4.3):\n" + "\n".join(low)
    assert page.errors == []


def test_alpha_curve_marks_rising_items_by_shape_and_word(page, server, demo):
    open_dataset(page, server, demo["id"], view="alpha")
    page.wait_for_selector("#alpha-curve[data-rendered]")
    drawn = page.evaluate("""() => {
      const el = document.querySelector('#alpha-curve');
      const t = el.data[0];
      return {symbols: t.marker.symbol, labels: t.text, y: t.y, x: t.x,
              svgText: [...el.querySelectorAll('svg text')].map((n) => n.textContent)};
    }""")
    alpha = page.evaluate("() => window.scalewright.state.analysis.reliability.alpha")
    rising = [x for x, y in zip(drawn["x"], drawn["y"], strict=True) if y is not None and y > alpha]
    steady = [x for x, y in zip(drawn["x"], drawn["y"], strict=True) if y is not None and y <= alpha]
    assert rising and steady, "the demo data plants items the scale is better without"
    for x, symbol, label in zip(drawn["x"], drawn["symbols"], drawn["labels"], strict=True):
        if x in rising:
            assert (symbol, label) == ("triangle-up", "rises")
        else:
            assert (symbol, label) == ("circle", "")
    # the words are on the chart itself: one "rises" per rising item and a key to the two shapes
    assert drawn["svgText"].count("rises") == len(rising)
    assert any("rises without the item" in t and "falls or holds" in t for t in drawn["svgText"])
    assert page.errors == []


def test_the_axe_check_reports_planted_violations(axe_page):
    # The check can fail: pale grey text on white (1.97:1) and an image without a text alternative.
    axe_page.set_content('<!doctype html><html lang="en"><head><title>planted</title></head><body><main>'
                         '<p style="color:#aaaaaa;background:#ffffff">pale words</p><img src="data:,">'
                         '</main></body></html>')
    found = serious_violations(axe_page)
    assert "color-contrast" in found and "image-alt" in found, found
    assert found.count("\n    ") >= 2  # each rule names its offending element


def test_axe_is_vendored_for_the_tests_only():
    from .axe import AXE_JS

    assert AXE_JS.is_file()
    static = AXE_JS.parents[4] / "static"
    assert static.is_dir()
    assert not list(static.rglob("axe*.js"))  # never served to users
