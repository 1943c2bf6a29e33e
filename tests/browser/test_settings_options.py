"""The settings page is built from GET /api/options: its controls, defaults and help are the server's."""
from __future__ import annotations

import httpx
import pytest

from .helpers import fitted_marker, js_state, open_dataset, wait_refit

pytestmark = pytest.mark.browser


def test_settings_page_shows_the_served_defaults_and_help(page, server, demo):
    options = httpx.get(f"{server}/api/options", timeout=10).json()
    open_dataset(page, server, demo["id"], view="settings")
    assert js_state(page, "s.options") == options
    assert js_state(page, "s.settings") == {o["name"]: o["default"] for o in options["settings"]}

    for o in options["settings"]:
        control = f"#set-{o['name']}"
        value = page.input_value(control) if o["type"] != "boolean" else page.is_checked(control)
        if o["type"] == "choice":
            assert value == o["default"], o["name"]
            shown = page.eval_on_selector(control, "s => [...s.options].map(x => [x.value, x.textContent])")
            assert shown == [[c["value"], c["label"]] for c in o["choices"]]
        elif o["type"] in ("integer", "number"):
            assert (float(value) if value else None) == o["default"], o["name"]
        help_text = page.eval_on_selector(control, "c => c.closest('.setting').querySelector('p').textContent")
        assert help_text == o["help"], o["name"]

    for t in options["thresholds"]:
        assert float(page.input_value(f"#th-{t['name']}")) == pytest.approx(t["default"]), t["name"]
        label = page.eval_on_selector(f"#th-{t['name']}", "i => i.closest('label').firstElementChild.textContent")
        assert label.startswith(t["label"]), t["name"]
        if t.get("help"):
            assert page.inner_text(f"#th-help-{t['name']}") == t["help"]
    assert page.errors == []


def test_a_setting_back_at_its_served_default_leaves_the_url(page, server, demo):
    options = httpx.get(f"{server}/api/options", timeout=10).json()
    rotation = next(o for o in options["settings"] if o["name"] == "rotation")
    other = next(c["value"] for c in rotation["choices"] if c["value"] != rotation["default"])
    open_dataset(page, server, demo["id"], view="settings")
    before = fitted_marker(page)
    page.select_option("#set-rotation", other)
    wait_refit(page, before)
    assert f"rot={other}" in page.url
    before = fitted_marker(page)
    page.select_option("#set-rotation", rotation["default"])
    wait_refit(page, before)
    assert "rot=" not in page.url
    assert js_state(page, "s.settings.rotation") == rotation["default"]
    assert page.errors == []
