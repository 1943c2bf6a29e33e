"""The hold-out confirmation card in the browser: run it on the demo data, read fit, loadings and misfit.

Source: demo_data/README.md (three constructs of eight items; W8 written for welcome, generated from ownership).
"""
from __future__ import annotations

import pytest

from .helpers import open_dataset

pytestmark = pytest.mark.browser


def test_confirmation_card_shows_fit_loadings_and_what_does_not_fit(page, server, demo):
    open_dataset(page, server, demo["id"], view="confirmation")
    page.click("#run-confirmation")
    page.wait_for_selector("table.confirmation-fit", timeout=60_000)
    fit = page.inner_text("table.confirmation-fit")
    assert "RMSEA" in fit and "Hu & Bentler (1999), a convention" in fit
    reading = page.inner_text("#confirmation-reading")
    assert "200 respondents explored, 200 held out" in reading  # demo_data/README.md: 400 respondents, split .5
    assert page.locator("table.confirmation-loadings tbody tr").count() == 24  # demo_data/README.md: 24 items
    assert "W8 also loads on ownership" in page.inner_text("table.confirmation-mi")  # demo_data/README.md
    assert page.locator("table.confirmation-congruence tbody tr").count() == 3
    # no split: the exploration structure is refused with the server's message, shown as text
    page.select_option("#confirmation-split", "")
    page.select_option("#confirmation-structure", "exploration")
    page.click("#run-confirmation")
    page.wait_for_selector("#confirmation-result .note.error")
    assert "exploration half" in page.inner_text("#confirmation-result")
    assert page.errors == []
