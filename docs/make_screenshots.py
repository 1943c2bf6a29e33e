"""Take the dashboard screenshots in docs/ on the demo data (headless Debian chromium).

Usage: .venv/bin/python docs/make_screenshots.py   (starts its own server with --demo in a temporary folder)
"""
from __future__ import annotations

import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import httpx
from playwright.sync_api import sync_playwright

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run"]


def settle(page, predicate: str = "() => document.body.dataset.fitted && !document.body.classList.contains('busy')"):
    deadline = time.time() + 60
    while not page.evaluate(predicate):
        if time.time() > deadline:
            raise TimeoutError(predicate)
        time.sleep(0.05)
    page.wait_for_timeout(600)  # let plotly finish drawing


def main() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    data = Path(tempfile.mkdtemp(prefix="scalewright-shots-"))
    proc = subprocess.Popen([sys.executable, "-m", "server", "serve", "--demo", "--port", str(port),
                             "--data-dir", str(data)], cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    try:
        for _ in range(300):
            try:
                if httpx.get(base + "/api/health", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.1)
        datasets = httpx.get(base + "/api/datasets").json()
        wave1 = next(d for d in datasets if "wave 1" in d["name"])
        wave2 = next(d for d in datasets if "wave 2" in d["name"])
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path="/usr/bin/chromium", headless=True, args=ARGS)
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            page.goto(f"{base}/?d={wave1['id']}&v=board")
            settle(page)
            page.fill("#who", "Ana")
            page.dispatch_event("#who", "change")
            for item in ("C7", "W3"):
                marker = page.evaluate("document.body.dataset.fitted")
                page.click(f'tr[data-item="{item}"] button.toggle')
                settle(page, f"() => document.body.dataset.fitted !== '{marker}' && !document.body.classList.contains('busy')")
            page.focus('tr[data-item="W8"] .flag')
            page.wait_for_timeout(300)
            page.screenshot(path=str(DOCS / "dashboard.png"))
            page.click("#tab-loadings")
            settle(page)
            page.screenshot(path=str(DOCS / "loadings.png"), full_page=True)
            page.click("#tab-alpha")
            settle(page)
            page.screenshot(path=str(DOCS / "alpha-curves.png"), full_page=True)
            page.click("#tab-stability")
            page.select_option("#wave-first", wave1["id"])
            page.select_option("#wave-second", wave2["id"])
            page.click("#run-retest")
            page.wait_for_selector("table.icc")
            page.wait_for_timeout(800)
            page.screenshot(path=str(DOCS / "stability.png"), full_page=True)
            browser.close()
    finally:
        proc.terminate()
        proc.wait(timeout=10)
    print("wrote", ", ".join(str(p.relative_to(ROOT)) for p in sorted(DOCS.glob("*.png"))))
    return 0


if __name__ == "__main__":
    sys.exit(main())
