"""The Workspace & log view: download a backup, import it, read the audit log (names shown as text)."""
from __future__ import annotations

import json
import zipfile

import httpx
import pytest

from .helpers import upload, wait_js

pytestmark = pytest.mark.browser

CSV = b"id,W1,W2,W3\n1,1,2,2\n2,2,2,3\n3,3,4,4\n4,4,4,5\n5,5,5,5\n"
NAME = "<img src=x onerror=alert(1)> pilot"


def test_backup_import_and_audit_log(page, server, tmp_path):
    ds = upload(server, CSV, "workspace.csv", name=NAME, who="Ana")
    page.goto(f"{server}/?v=workspace")
    page.fill("#who", "Zoë")
    page.dispatch_event("#who", "change")
    wait_js(page, "() => document.querySelector('table.audit')")
    row = page.locator("table.audit tbody tr", has_text="workspace.csv").first
    assert "uploaded a dataset" in row.inner_text() and "Ana" in row.inner_text()
    assert NAME in row.inner_text()  # the name is text, not markup
    assert page.locator("table.audit img").count() == 0

    with page.expect_download() as info:
        page.click("#workspace-backup")
    saved = tmp_path / "ws.zip"
    info.value.save_as(saved)
    with zipfile.ZipFile(saved) as zf:
        manifest = json.loads(zf.read("manifest.json"))
        assert zf.read(f"datasets/{ds['id']}/raw") == CSV
    assert manifest["format"] == "scalewright-backup"

    assert httpx.delete(f"{server}/api/datasets/{ds['id']}", timeout=30).status_code == 204
    page.set_input_files("#workspace-file", str(saved))
    page.click("#workspace-import")
    wait_js(page, "() => document.querySelector('#workspace-message')")
    assert "added 1 dataset" in page.inner_text("#workspace-message")
    first = page.locator("table.audit tbody tr").first.inner_text()
    assert "imported a backup" in first and "Zoë" in first
    assert any(e["action"] == "backup" and e["who"] == "Zoë" for e in httpx.get(f"{server}/api/audit").json())
    assert httpx.get(f"{server}/api/datasets/{ds['id']}").json()["sha256"] == ds["sha256"]
    assert not page.errors
