"""The loadings heatmap of a large pool (issue 14): no value printed in its many cells (the hover and the row
read-out keep every value), the item labels get the room they need without plotly's automargin, and the
demo's small heatmap still prints its values. Nothing is timed here (the speed is in bench/bench_dashboard.py)."""
from __future__ import annotations

import io

import numpy as np
import pytest

from .helpers import open_dataset, upload, wait_js

pytestmark = pytest.mark.browser

K = 141  # 3 factors: 423 cells, above the 400 that charts.js prints
CONSTRUCTS = ["belonging and being welcomed", "shared responsibility for the space", "skill growth over the term"]

TRACE = ("(() => { const el = document.getElementById('heatmap'); const t = el.data[0];"
         " return {y: t.y, z: t.z, text: t.text || null, template: t.texttemplate || null, hover: t.hovertemplate,"
         " auto: el.layout.yaxis.automargin}; })()")
# every y tick label lies inside the chart's own box (none clipped at the left edge)
LABELS_INSIDE = ("(() => { const el = document.getElementById('heatmap'); const box = el.getBoundingClientRect();"
                 " const ticks = [...el.querySelectorAll('.ytick text')];"
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
                  " return el && el.dataset.rendered && el.data; }", timeout=120_000)


def test_a_large_pool_heatmap_prints_no_cell_values_but_keeps_them_in_hover_and_read_out(page, server):
    responses, codebook = _pool()
    record = upload(server, responses, "large_pool.csv", codebook)
    open_dataset(page, server, record["id"], view="loadings")
    _rendered(page)
    t = page.evaluate(TRACE)
    assert len(t["y"]) == K and len(t["z"][0]) >= 3
    assert t["text"] is None and t["template"] is None  # colour only in the cells
    assert "%{z:.3f}" in t["hover"]  # the hover still gives each value
    assert page.evaluate("[...document.querySelectorAll('#heatmap svg text')]"
                         ".filter((s) => /^-?\\.\\d\\d$/.test(s.textContent)).length") == 0
    assert "colour only" in page.inner_text("#view")
    assert t["auto"] is False  # the labels' room is measured by the page, not by plotly's second pass
    assert page.evaluate(LABELS_INSIDE)
    # the keyboard read-out of a row gives its loadings in words
    page.focus("#heat-keys")
    page.keyboard.press("ArrowDown")
    first = t["y"][0].split(" · ")[0].replace("⚑ ", "")
    wait_js(page, "name => document.getElementById('heat-row').textContent.startsWith(name)", first)
    assert "Loadings:" in page.inner_text("#heat-row")
    assert page.errors == []


def test_the_demo_heatmap_prints_its_values_and_fits_its_labels(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings", extra="&cut=0")
    _rendered(page)
    t = page.evaluate(TRACE)
    assert t["text"] is not None and t["template"] == "%{text}"
    assert all(cell != "" for row in t["text"] for cell in row)  # cut-off 0: every loading printed
    assert page.evaluate(LABELS_INSIDE)
    assert "colour only" not in page.inner_text("#view")
    assert page.errors == []


# The cells' image, its lines and the colour key (issue 14, second round): plotly paints one pixel per cell (no
# xgap/ygap, which made it paint and PNG-encode a canvas the size of the plot on every redraw); one path shape
# draws the lines between the cells; the colour key is the page's HTML, not a plotly colour bar redrawn each time.
CELLS = ("async () => { const el = document.getElementById('heatmap'); const t = el.data[0];"
         " const img = el.querySelector('.hm image'); const probe = new Image();"
         " probe.src = img.getAttribute('href') || img.getAttribute('xlink:href'); await probe.decode();"
         " return {gaps: [t.xgap || 0, t.ygap || 0], scale: t.showscale, rows: t.y.length, cols: t.x.length,"
         " shapes: el.layout.shapes.filter((s) => s.name === 'cell-gaps').map((s) => s.path),"
         " bar: el.querySelectorAll('.colorbar').length, render: img.style.imageRendering,"
         " decoded: [probe.naturalWidth, probe.naturalHeight]}; }")


def test_the_heatmap_paints_a_pixel_per_cell_with_its_lines_and_an_html_colour_key(page, server, demo):
    open_dataset(page, server, demo["id"], view="loadings")
    _rendered(page)
    c = page.evaluate(CELLS)
    assert c["gaps"] == [0, 0] and c["scale"] is False and c["bar"] == 0
    assert c["render"] == "pixelated"
    assert c["decoded"] == [c["cols"], c["rows"]]  # the image holds one pixel per cell, scaled up by the browser
    assert len(c["shapes"]) == 1  # one path: a line between each pair of rows and of columns
    assert c["shapes"][0].count("M") == (c["rows"] - 1) + (c["cols"] - 1)
    key = page.locator("#heat-key")
    assert key.get_attribute("role") == "img" and "−1" in key.get_attribute("aria-label")
    assert key.inner_text().split() == ["loading", "−1", "−.5", "0", ".5", "1"]
    assert page.errors == []
