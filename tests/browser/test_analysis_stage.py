"""A slow first analysis says which stage the server is computing (issue 14): a status line in the header shows the
latest stage of the page's own request and the seconds, and goes once the answer arrives. Nothing is timed here.

The slow part is chosen, not waited for: 70 items and 5,000 parallel-analysis draws (the most the settings allow),
a key the upload's background analysis (default settings) did not compute.
"""
from __future__ import annotations

import io

import numpy as np
import pytest

from .axe import serious_violations
from .helpers import upload, wait_js

pytestmark = pytest.mark.browser

# Every text the status line shows, in order (a MutationObserver in the page).
WATCH = """() => {
  window.stageLog = [];
  const seen = () => {
    const line = document.querySelector('#analysis-stage');
    const entry = line && !line.hidden ? line.textContent : '';
    if (window.stageLog[window.stageLog.length - 1] !== entry) window.stageLog.push(entry);
  };
  new MutationObserver(seen).observe(document.body, { subtree: true, childList: true, characterData: true,
    attributes: true, attributeFilter: ['hidden'] });
}"""

STAGE_WORDS = ("parallel analysis of 70 items", "correlations of", "reliability of", "extraction (", "item table",
               "omega hierarchical", "waiting:", "pruning path", "descriptives of", "reading the responses",
               "the whole pool", "subscales")


def pool_csv(n: int = 2000, k: int = 70, seed: int = 41) -> bytes:
    rng = np.random.default_rng(seed)
    load = np.zeros((k, 3))
    load[np.arange(k), np.arange(k) % 3] = rng.uniform(0.5, 0.8, k)
    z = rng.standard_normal((n, 3)) @ load.T + rng.standard_normal((n, k)) * np.sqrt(1 - (load ** 2).sum(1))
    buf = io.StringIO()
    buf.write(",".join(f"s{j + 1}" for j in range(k)) + "\n")
    np.savetxt(buf, np.clip(np.round(z * 1.1 + 3), 1, 5).astype(int), fmt="%d", delimiter=",")
    return buf.getvalue().encode()


def test_a_slow_first_analysis_shows_its_stage_then_the_line_goes(axe_page, server):
    page = axe_page  # the CSP is bypassed only to inject axe-core
    ds = upload(server, pool_csv(), "stage_pool.csv", scale_min=1, scale_max=5)
    page.add_init_script(f"({WATCH})()".replace("document.body", "document"))
    page.goto(f"{server}/?d={ds['id']}&v=board&pa_iterations=5000")
    wait_js(page, "() => /^Computing: \\S/.test(document.querySelector('#analysis-stage:not([hidden])')"
                  "?.textContent || '') && !document.querySelector('#analysis-stage').textContent.includes('starting')",
            timeout=30_000)
    line = page.locator("#analysis-stage")
    assert line.get_attribute("aria-live") == "polite" and line.get_attribute("role") == "status"
    assert serious_violations(page, "header") == ""  # the line's text on the header: contrast, size
    wait_js(page, "() => document.body.dataset.fitted && !document.body.classList.contains('busy')", timeout=60_000)
    assert page.locator("#analysis-stage").is_hidden()  # gone with the answer
    log = [e for e in page.evaluate("window.stageLog") if e]
    named = [e for e in log if e.startswith("Computing: ") and any(w in e for w in STAGE_WORDS)]
    assert named, log
    seconds = [int(e.rsplit("(", 1)[1].split(" s)")[0]) for e in log if e.endswith(" s)")]
    assert seconds and seconds == sorted(seconds), log  # the seconds tick on, never back
    assert page.evaluate("window.scalewright.state.analysis.settings.pa_iterations") == 5000
    assert page.errors == []
