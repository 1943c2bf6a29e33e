"""The dashboard's own page can still upload once Host and Origin are checked: on 127.0.0.1 and on a LAN address."""
from __future__ import annotations

import pytest

from tests.serverproc import lan_address, running_server

pytestmark = pytest.mark.browser

POST_FROM_PAGE = """async (csv) => {
    const form = new FormData();
    form.append('file', new Blob([csv], {type: 'text/csv'}), 'from_page.csv');
    form.append('id_column', 'id');
    const r = await fetch('/api/datasets', {method: 'POST', body: form});
    return {status: r.status, body: await r.json()};
}"""
CSV = "id,Q1,Q2,Q3\nr1,1,2,3\nr2,2,3,4\nr3,3,4,5\nr4,4,5,1\nr5,5,1,2\n"


def test_the_page_uploads_on_127_0_0_1(server, page):
    page.goto(f"{server}/")
    answer = page.evaluate(POST_FROM_PAGE, CSV)
    assert answer["status"] == 201, answer
    assert answer["body"]["filename"] == "from_page.csv" and answer["body"]["n_items"] == 3
    assert page.errors == []


@pytest.fixture
def lan_server(tmp_path):
    """The server bound to 0.0.0.0 with token 't', reached on this machine's LAN address."""
    lan = lan_address()
    if lan is None:
        pytest.skip("This machine has no non-loopback IPv4 address to reach a shared server on.")
    with running_server(tmp_path / "d", "--host", "0.0.0.0", address=lan, token="t") as (_, base):
        yield base


def test_the_page_uploads_on_a_lan_address_with_the_token(lan_server, page):
    page.goto(f"{lan_server}/?token=t")  # the link the server prints; the token then rides in a cookie
    assert page.evaluate("document.title")
    answer = page.evaluate(POST_FROM_PAGE, CSV)
    assert answer["status"] == 201, answer
    listed = page.evaluate("async () => (await (await fetch('/api/datasets')).json()).map(d => d.filename)")
    assert listed == ["from_page.csv"]
