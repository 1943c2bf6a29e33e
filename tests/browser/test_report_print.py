"""The snapshot report prints on A4 and Letter portrait without clipping, with the hashes on every page.

The footer is drawn by @page margin boxes (Chromium 131 and later), so it never covers the text.

Chromium renders the report to PDF (page.pdf); pypdf reads the page size and each page's text. The width
check emulates print media at the printable width (the page minus the report's @page side margins) and
measures the layout, since a PDF clips what overflows instead of widening.
"""
from __future__ import annotations

import io

import httpx
import pytest

from .conftest import DEMO
from .helpers import upload

pytestmark = pytest.mark.browser

LONG_WORD = "Unbrokenwordthatgoesonandonwithoutanyplacetobreakit" * 3  # 156 letters, no space
PX_PER_MM = 96 / 25.4
SIDE_MARGIN_MM = 12  # the report's @page left and right margins (server/report.py _CSS)
PAGES = {"A4": (210.0, 595.28), "Letter": (215.9, 612.0)}  # width in mm, MediaBox width in points


@pytest.fixture(scope="module")
def long_report(server):
    """A snapshot of the demo pool (3 subscales, 23 kept items) whose first item has a very long word."""
    codebook = (DEMO / "workshop_codebook.csv").read_text(encoding="utf-8").splitlines()
    assert codebook[1].startswith("W1,")
    codebook[1] = f"W1,\"When I walk in <b>, {LONG_WORD} says hello.\",welcome,0,1,5"
    ds = upload(server, (DEMO / "workshop_responses.csv").read_bytes(), "workshop_responses.csv",
                "\n".join(codebook).encode(), missing_codes="-9", id_column="respondent")
    analysis = httpx.post(f"{server}/api/datasets/{ds['id']}/analysis", json={}, timeout=120)
    assert analysis.status_code == 200, analysis.text
    items = analysis.json()["settings"]["items"]
    assert len(items) == 24
    kept, dropped = [i for i in items if i != "O4"], "O4"
    r = httpx.post(f"{server}/api/datasets/{ds['id']}/snapshots", timeout=120,
                   json={"name": "Print check", "items": kept, "settings": {},
                         "removed": [{"item": dropped, "reason": "Weak", "code": "weak"}]})
    assert r.status_code == 201, r.text
    snap = r.json()
    return f"{server}/api/snapshots/{snap['id']}/report", snap


@pytest.mark.parametrize("paper", sorted(PAGES))
def test_report_fits_the_printable_width(page, long_report, paper):
    url, _ = long_report
    width_mm, _ = PAGES[paper]
    printable = int((width_mm - 2 * SIDE_MARGIN_MM) * PX_PER_MM)  # CSS px
    page.set_viewport_size({"width": printable, "height": 1000})
    page.emulate_media(media="print")
    page.goto(url)
    assert LONG_WORD in page.inner_text("body")
    assert page.evaluate("document.documentElement.scrollWidth") <= printable
    too_wide = page.evaluate("""(limit) => [...document.querySelectorAll('body *')]
        .filter((el) => el.getBoundingClientRect().right > limit + 0.5)
        .map((el) => `${el.tagName}.${el.className} ${Math.round(el.getBoundingClientRect().right)}`)""", printable)
    assert too_wide == [], too_wide[:10]
    tables = page.evaluate("[...document.querySelectorAll('table')].map((t) => t.getBoundingClientRect().right)")
    assert len(tables) > 5 and max(tables) <= printable


@pytest.mark.parametrize("paper", sorted(PAGES))
def test_report_pdf_has_the_page_size_and_the_hashes_on_every_page(page, long_report, paper):
    from pypdf import PdfReader

    url, snap = long_report
    page.goto(url)
    pdf = PdfReader(io.BytesIO(page.pdf(format=paper, print_background=True, prefer_css_page_size=False)))
    _, points = PAGES[paper]
    assert len(pdf.pages) >= 2
    for i, p in enumerate(pdf.pages):
        assert abs(float(p.mediabox.width) - points) < 1, (i, p.mediabox)
        assert float(p.mediabox.width) < float(p.mediabox.height)  # portrait
        text = "".join(p.extract_text().split())  # a long hash may wrap: compare without white space
        assert f"page{i + 1}of{len(pdf.pages)}" in text, f"page {i + 1} has no printed footer"
        footer = text[text.index("Snapshot" + snap["id"] + "\u00b7"):]  # the footer line, not the table
        assert footer.startswith(f"Snapshot{snap['id']}\u00b7datasetSHA-256{snap['dataset_sha256']}"), footer[:120]
