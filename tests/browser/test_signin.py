"""Signing in on a team server (people defined, a SQL store): the page asks for the personal token in a
labelled dialog (no serious axe-core violation), says why a wrong token is refused, keeps the right one in
an HttpOnly cookie (not readable by the page), shows the signed-in name instead of "You are", signs out."""
from __future__ import annotations

import pytest

from server.people import add_person
from server.sqlstore import SqlStore
from tests.serverproc import running_server

from .axe import serious_violations

pytestmark = pytest.mark.browser


@pytest.fixture
def team_server(tmp_path):
    url = f"sqlite:///{tmp_path / 'db' / 'team.db'}"
    store = SqlStore(url)
    _, token = add_person(store, "Ana", workspace="lab", role="analyst")
    store.close()
    with running_server(tmp_path / "d", "--database", url) as (_, base):
        yield base, token


def test_the_page_signs_in_and_out_with_a_personal_token(team_server, axe_page):
    base, token = team_server
    page = axe_page
    page.goto(f"{base}/")
    dialog = page.locator("#signin-dialog")
    dialog.wait_for(state="visible", timeout=30_000)
    assert serious_violations(page, "#signin-dialog") == ""
    page.get_by_label("Access token").fill("swp_0123456789abcdef_" + "z" * 43)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_function("() => document.querySelector('#signin-problem').textContent.includes('not valid')")
    page.get_by_label("Access token").fill(token)
    page.get_by_role("button", name="Sign in").click()
    page.get_by_role("button", name="Sign out").wait_for(timeout=30_000)
    assert page.locator("#signin-dialog").count() == 0
    assert page.eval_on_selector("#who", "el => [el.value, el.readOnly]") == ["Ana", True]
    assert page.evaluate("document.cookie") == ""  # HttpOnly: the token is not readable by scripts
    assert page.evaluate("fetch('/api/datasets').then(r => r.status)") == 200
    page.get_by_role("button", name="Sign out").click()
    page.locator("#signin-dialog").wait_for(state="visible", timeout=30_000)
    assert page.evaluate("fetch('/api/datasets').then(r => r.status)") == 401
    assert page.errors == []
