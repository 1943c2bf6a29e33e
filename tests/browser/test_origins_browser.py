"""The dashboard's own page can still upload once Host and Origin are checked: on 127.0.0.1 and on a LAN address."""
from __future__ import annotations

import socket
import subprocess
import sys
import time

import httpx
import pytest

from .conftest import ROOT, _free_port

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


def _lan_address() -> str | None:
    """This machine's address on its default route (a UDP connect sends nothing), if it has one."""
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            s.connect(("192.0.2.1", 9))  # TEST-NET-1: only the routing decision, no packet leaves
            address = s.getsockname()[0]
    except OSError:
        return None
    return None if address.startswith("127.") or address == "0.0.0.0" else address


@pytest.fixture
def lan_server(tmp_path):
    """The server bound to 0.0.0.0 with token 't', reached on this machine's LAN address."""
    lan = _lan_address()
    if lan is None:
        pytest.skip("This machine has no non-loopback IPv4 address to reach a shared server on.")
    port = _free_port()
    log = tmp_path / "server.log"
    with open(log, "wb") as out:
        proc = subprocess.Popen([sys.executable, "-m", "server", "serve", "--host", "0.0.0.0", "--port", str(port),
                                 "--token", "t", "--data-dir", str(tmp_path / "d")], cwd=ROOT, stdout=out,
                                stderr=subprocess.STDOUT)
    base = f"http://{lan}:{port}"
    try:
        deadline = time.time() + 30
        while True:
            try:
                if httpx.get(f"{base}/api/health?token=t", timeout=1, trust_env=False).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if proc.poll() is not None or time.time() > deadline:
                pytest.fail("The shared server did not start: " + log.read_text(errors="replace")[-2000:])
            time.sleep(0.1)
        yield base
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def test_the_page_uploads_on_a_lan_address_with_the_token(lan_server, page):
    page.goto(f"{lan_server}/?token=t")  # the link the server prints; the token then rides in a cookie
    assert page.evaluate("document.title")
    answer = page.evaluate(POST_FROM_PAGE, CSV)
    assert answer["status"] == 201, answer
    listed = page.evaluate("async () => (await (await fetch('/api/datasets')).json()).map(d => d.filename)")
    assert listed == ["from_page.csv"]
