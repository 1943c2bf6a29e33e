"""The loadings heatmap of a large pool (issue 14): no value printed in its many cells (the hover and the row
read-out keep every value), the item labels get the room they need (measured by the page), and the demo's small
heatmap still prints its values. Nothing is timed here (the speed is in bench/bench_dashboard.py)."""
from __future__ import annotations

import io

import numpy as np
import pytest

from .helpers import open_dataset, upload, wait_js

pytestmark = pytest.mark.browser

K = 141  # 3 factors: 423 cells, above the 400 that charts.js prints
CONSTRUCTS = ["belonging and being welcomed", "shared responsibility for the space", "skill growth over the term"]

# the drawn SVG: its row labels, factor names, cells and printed values
DRAWN = ("(() => { const el = document.getElementById('heatmap'); const all = (c) => [...el.querySelectorAll(c)];"
         " const text = (c) => all(c).map((t) => t.textContent);"
         " return {labels: text('.heat-label'), factors: text('.heat-factor'), cells: all('.heat-cell').length,"
         " values: text('.heat-value')}; })()")
# every row label lies inside the chart's own box (none clipped at the left edge)
LABELS_INSIDE = ("(() => { const el = document.getElementById('heatmap'); const box = el.getBoundingClientRect();"
                 " const ticks = [...el.querySelectorAll('.heat-label')];"
                 " return ticks.length > 0"
                 " && ticks.every((t) => t.getBoundingClientRect().left >= box.left - 0.5); })()")


def _pool(k: int = K, n: int = 600, seed: int = 14) -> tuple[bytes, bytes]:
    """Likert answers of n respondents to k items on 3 factors, and a codebook with long construct names."""
    rng = np.random.default_rng(seed)
    load = np.zeros((k, 3))
    for j in range(k):
        load[j, j % 3] = rng.uniform(0.55, 0.8)
    z = rng.standard_normal((n, 3)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    x = np.clip(np.round(z * 1.1 + 3), 1, 5).astype(int)
    names = [f"item{j + 1:03d}" for j in range(k)]
    buf = io.StringIO()
    buf.write(",".join(names) + "\n")
    np.savetxt(buf, x, fmt="%d", delimiter=",")
    book = "item,text,construct,reverse,min,max\n" + "".join(
        f"{name},Statement number {j + 1},{CONSTRUCTS[j % 3]},0,1,5\n" for j, name in enumerate(names))
    return buf.getvalue().encode(), book.encode()


def _rendered(page):
    wait_js(page, "() => { const el = document.querySelector('#heatmap');"
                  " return el && el.dataset.rendered && el.querySelector('svg .heat-cell'); }", timeout=120_000)


def test_a_large_pool_heatmap_prints_no_cell_values_but_keeps_them_in_hover_and_read_out(page, server):
    responses, codebook = _pool()
    record = upload(server, responses, "large_pool.csv", codebook)
    open_dataset(page, server, record["id"], view="loadings")
    _rendered(page)
    t = page.evaluate(DRAWN)
    assert len(t["labels"]) == K and len(t["factors"]) >= 3 and t["cells"] == K * len(t["factors"])
    assert t["values"] == []  # colour only in the cells
    assert page.evaluate("[...document.querySelectorAll('#heatmap svg text')]"
                         ".filter((s) => /^-?\\.\\d\\d$/.test(s.textContent)).length") == 0
    assert "colour only" in page.inner_text("#view")
    assert page.evaluate(LABELS_INSIDE)
    # the hover still gives each value, to 3 decimals
    box = page.locator("#heatmap .heat-cells").bounding_box()
    page.mouse.move(box["x"] + 3, box["y"] + 3)
    wait_js(page, "() => !document.querySelector('#heatmap .heat-tip').hidden", None, 5000)
    head = page.inner_text("#heatmap .heat-tip strong")
    assert head.startswith(t["labels"][0] + " on " + t["factors"][0] + ": ")
    assert len(head.rsplit(": ", 1)[1].split(".")[1]) == 3
    # the keyboard read-out of a row gives its loadings in words
    page.focus("#heat-keys")
    page.keyboard.press("ArrowDown")
    first = t["labels"][0].split(" · ")[0].replace("⚑ ", "")
    wait_js(page, "name => document.getElementById('heat-row').textContent.startsWith(name)", first)
    assert "Loadings:" in page.inner_text("#heat-row")
    assert page.errors == []


def test_the_demo_heatmap_prints_its_values_and_fits_its_labels(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings", extra="&cut=0")
    _rendered(page)
    t = page.evaluate(DRAWN)
    assert len(t["values"]) == t["cells"] == len(t["labels"]) * len(t["factors"]) > 0
    assert all(cell != "" for cell in t["values"])  # cut-off 0: every loading printed
    assert page.evaluate(LABELS_INSIDE)
    assert "colour only" not in page.inner_text("#view")
    assert page.errors == []


# The lines between the cells and the colour key (issue 14): one path draws a line between each pair of rows and
# of columns, in the colour of the panel the chart sits on; the colour key is the page's HTML, drawn once.
CELLS = ("() => { const el = document.getElementById('heatmap'); const gaps = [...el.querySelectorAll('.heat-gaps')];"
         " return {rows: el.querySelectorAll('.heat-label').length, cols: el.querySelectorAll('.heat-factor').length,"
         " paths: gaps.map((g) => g.getAttribute('d')), stroke: gaps.map((g) => getComputedStyle(g).stroke),"
         " panel: getComputedStyle(el.closest('section.panel')).backgroundColor,"
         " svgs: el.querySelectorAll('svg').length,"
         " plotly: el.querySelectorAll('.js-plotly-plot, .colorbar').length}; }")


def test_the_heatmap_draws_its_cell_lines_as_one_path_and_an_html_colour_key(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    _rendered(page)
    c = page.evaluate(CELLS)
    assert c["svgs"] == 1 and c["plotly"] == 0
    assert len(c["paths"]) == 1  # one path: a line between each pair of rows and of columns
    assert c["paths"][0].count("M") == (c["rows"] - 1) + (c["cols"] - 1)
    assert c["stroke"] == [c["panel"]]
    key = page.locator("#heat-key")
    assert key.get_attribute("role") == "img" and "−1" in key.get_attribute("aria-label")
    assert key.inner_text().split() == ["loading", "−1", "−.5", "0", ".5", "1"]
    assert page.errors == []
