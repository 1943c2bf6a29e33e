"""Issue 12: two short forms side by side in the snapshots tab (and printed), and the snapshot dialog's rough
edges: a fresh name and note each time, the scoring rule chosen at save, the list at 1024 px."""
from __future__ import annotations

import httpx
import pytest

from .helpers import open_dataset, wait_js

pytestmark = pytest.mark.browser


def save(server: str, demo: dict, name: str, drop: list[str]) -> dict:
    items = [it["name"] for it in demo["items"]]
    r = httpx.post(f"{server}/api/datasets/{demo['id']}/snapshots", timeout=60,
                   json={"name": name, "items": [i for i in items if i not in drop],
                         "removed": [{"item": i, "reason": "agreed"} for i in drop]})
    assert r.status_code == 201, r.text
    return r.json()


def wording(demo: dict, item: str) -> str:
    return next(it["text"] for it in demo["items"] if it["name"] == item)


def test_two_snapshots_side_by_side_show_both_item_lists_with_wording_alpha_and_omega(page, server, demo):
    a = save(server, demo, "SBS left: without C7", ["C7"])
    b = save(server, demo, "SBS right: without W8, O4", ["W8", "O4"])
    open_dataset(page, server, demo["id"], view="snapshots")
    page.wait_for_selector("#sbs-picker")
    page.select_option("#sbs-left", a["id"])
    page.select_option("#sbs-right", b["id"])
    page.click("#sbs-show")
    page.wait_for_selector("#side-by-side .sbs-subscale")
    welcome = page.locator('#side-by-side .sbs-subscale[data-subscale="welcome"]')
    left, right = welcome.locator(".sbs-col").nth(0), welcome.locator(".sbs-col").nth(1)
    assert "SBS left: without C7" in left.inner_text() and "SBS right: without W8, O4" in right.inner_text()
    # both item lists with their wording; W8 only in the left form, marked in words
    assert wording(demo, "W2") in left.inner_text() and wording(demo, "W2") in right.inner_text()
    w8 = left.locator("tr", has_text=wording(demo, "W8"))
    assert "only here" in w8.inner_text()
    assert wording(demo, "W8") not in right.inner_text()
    assert "only here" not in left.locator("tr", has_text=wording(demo, "W2")).inner_text()
    contribution = page.locator('#side-by-side .sbs-subscale[data-subscale="contribution"] .sbs-col').nth(1)
    assert "only here" in contribution.locator("tr", has_text=wording(demo, "C7")).inner_text()
    # per-subscale alpha (with interval) and omega, as each snapshot stored them
    for col, snap in ((left, a), (right, b)):
        block = snap["analysis"]["constructs"]["welcome"]
        coef = col.locator(".sbs-coef").inner_text()
        assert f"α {block['alpha']:.3f}".replace("0.", ".") in coef
        assert f"{block['alpha_ci'][0]:.3f}".replace("0.", ".") in coef
        assert f"ω total {block['omega_total']:.3f}".replace("0.", ".") in coef
        assert "ω hierarchical" not in coef  # a subscale's block has none: nothing is written, not "not computed"
    total = page.inner_text("#side-by-side table.sbs-total")
    assert f"{a['analysis']['reliability']['omega_hierarchical']:.3f}".replace("0.", ".") in total
    assert "W8" in page.inner_text("#side-by-side .sbs-differences")
    assert page.locator("#sbs-print").is_visible()

    # printed on an A4-wide page (210 mm at 96 px per inch = 794 px): only the side-by-side, nothing clipped
    page.set_viewport_size({"width": 794, "height": 1123})
    page.emulate_media(media="print")
    assert not page.locator("#sbs-picker").is_visible() and not page.locator("table.snapshots").is_visible()
    assert not page.locator("#sbs-print").is_visible()
    assert page.locator("#side-by-side").is_visible()
    assert page.evaluate("document.documentElement.scrollWidth <= document.documentElement.clientWidth")
    assert page.evaluate("[...document.querySelectorAll('#side-by-side table')].every(t => "
                         "t.getBoundingClientRect().right <= document.documentElement.clientWidth + 0.5)")
    assert page.errors == []


def test_a_snapshot_beside_the_current_view(page, server, demo):
    save(server, demo, "SBS only one", ["C7"])
    open_dataset(page, server, demo["id"], view="snapshots")
    page.wait_for_selector("#sbs-picker")
    page.select_option("#sbs-left", label=page.locator("#sbs-left option", has_text="SBS only one").first.inner_text())
    page.select_option("#sbs-right", "current")
    page.click("#sbs-show")
    page.wait_for_selector("#side-by-side .sbs-subscale")
    assert "beside “Current view”" in page.inner_text("#side-by-side h3")
    contribution = page.locator('#side-by-side .sbs-subscale[data-subscale="contribution"] .sbs-col').nth(1)
    assert "only here" in contribution.locator("tr", has_text=wording(demo, "C7")).inner_text()
    assert page.errors == []


def test_the_dialog_starts_blank_each_time_and_keeps_saved_by(page, server, demo):
    open_dataset(page, server, demo["id"])
    page.fill("#who", "Mira")
    page.dispatch_event("#who", "change")
    page.click("#save-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    page.fill("#snap-name", "First of two")
    page.fill("#snap-note", "Only about the first one")
    page.click("#snap-save")
    wait_js(page, "() => !document.querySelector('#snapshot-dialog').open")
    page.wait_for_selector("table.snapshots tbody tr:has-text('First of two')")
    page.click("#save-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    assert page.input_value("#snap-name") == ""
    assert page.input_value("#snap-note") == ""
    assert page.input_value("#snap-author") == "Mira"
    assert page.input_value("#snap-method") == "mean" and page.input_value("#snap-min-share") == "80"
    page.fill("#snap-name", "Second of two")
    page.click("#snap-save")
    page.wait_for_selector("table.snapshots tbody tr:has-text('Second of two')")
    snaps = httpx.get(f"{server}/api/datasets/{demo['id']}/snapshots", timeout=30).json()
    second = next(s for s in snaps if s["name"] == "Second of two")
    assert second["note"] == "" and second["author"] == "Mira"
    # the snapshots tab's own button opens the same dialog
    page.click("#open-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    assert page.input_value("#snap-name") == ""
    assert page.errors == []


def test_a_snapshot_saved_with_sum_has_a_sum_scoring_rule(page, server, demo):
    open_dataset(page, server, demo["id"])
    page.click("#save-snapshot")
    page.wait_for_selector("#snapshot-dialog[open]")
    page.fill("#snap-name", "Scored as sums")
    page.select_option("#snap-method", "sum")
    page.fill("#snap-min-share", "75")
    page.click("#snap-save")
    page.wait_for_selector("table.snapshots tbody tr:has-text('Scored as sums')")
    snaps = httpx.get(f"{server}/api/datasets/{demo['id']}/snapshots", timeout=30).json()
    sid = next(s["id"] for s in snaps if s["name"] == "Scored as sums")
    rules = httpx.get(f"{server}/api/snapshots/{sid}/scoring-rules", timeout=30).json()
    assert rules["method"] == "sum" and rules["min_answered_share"] == 0.75
    assert all(s["method"] == "sum" for s in rules["subscales"])


def test_the_snapshot_list_fits_1024_px_without_clipping_compare(browser, server, demo):
    # names and notes as teams write them: long, and with long unbroken file-like words
    save(server, demo, "Short-form_v2_after_the_March_meeting_with_the_whole_team", ["C7"])
    r = httpx.post(f"{server}/api/datasets/{demo['id']}/snapshots", timeout=60,
                   json={"name": "With a long note", "items": [it["name"] for it in demo["items"]],
                         "author": "Maria-Theresa Oyelaran-Lindqvist",
                         "note": "See shared/minutes/2026-03-14_scale_meeting_final_v3.docx. " * 2})
    assert r.status_code == 201, r.text
    context = browser.new_context(viewport={"width": 1024, "height": 768})
    page = context.new_page()
    try:
        open_dataset(page, server, demo["id"], view="snapshots")
        page.wait_for_selector("table.snapshots")
        buttons = page.locator("table.snapshots button", has_text="Compare")
        assert buttons.count() >= 2
        for i in range(buttons.count()):
            box = buttons.nth(i).bounding_box()
            assert box is not None and box["x"] >= 0 and box["x"] + box["width"] <= 1024, box
        assert page.evaluate("(() => { const s = document.querySelector('table.snapshots').closest('.table-scroll');"
                             " return s.scrollWidth <= s.clientWidth; })()")
        assert page.evaluate("document.documentElement.scrollWidth <= document.documentElement.clientWidth")
    finally:
        context.close()
