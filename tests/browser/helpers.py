"""Helpers shared by the browser tests."""
from __future__ import annotations

import time

import httpx


def upload(base: str, responses: bytes, filename: str, codebook: bytes | None = None, **form) -> dict:
    files = {"file": (filename, responses, "text/csv")}
    if codebook is not None:
        files["codebook"] = ("codebook.csv", codebook, "text/csv")
    r = httpx.post(f"{base}/api/datasets", files=files, data={k: str(v) for k, v in form.items()}, timeout=30)
    assert r.status_code == 201, r.text
    return r.json()


def wait_js(page, predicate: str, arg=None, timeout: float = 30_000, poll: float = 0.02):
    """Poll ``predicate`` (a JS function source, called with ``arg``) until it is truthy.

    Playwright's own wait_for_function evaluates through ``new Function``, which the page's
    Content-Security-Policy (no 'unsafe-eval') rightly forbids; page.evaluate is not affected.
    """
    deadline = time.monotonic() + timeout / 1000
    while True:
        if page.evaluate(predicate, arg):
            return
        if time.monotonic() > deadline:
            raise TimeoutError(f"Timed out after {timeout} ms waiting for: {predicate}")
        time.sleep(poll)


def fitted_marker(page) -> str:
    return page.evaluate("document.body.dataset.fitted || ''")


def wait_refit(page, before: str, timeout: float = 45_000):
    """Wait until a new analysis has been applied and rendered (and no refit is pending)."""
    wait_js(page, "prev => document.body.dataset.fitted && document.body.dataset.fitted !== prev "
                  "&& !document.body.classList.contains('busy')", before, timeout)


def open_dataset(page, base: str, dataset_id: str, view: str = "board", extra: str = ""):
    page.goto(f"{base}/?d={dataset_id}&v={view}{extra}")
    wait_until_fitted(page)


def wait_until_fitted(page, timeout: float = 60_000):
    wait_js(page, "() => document.body.dataset.fitted && !document.body.classList.contains('busy')", None, timeout)


def js_state(page, expr: str):
    return page.evaluate(f"(() => {{ const s = window.scalewright.state; return {expr}; }})()")
