"""Dashboard timings from the browser tests (issue 5): read, not re-measured.

The browser tests (tests/browser/, part of ``make test``) time the page in Debian's chromium and write
bench/out/browser_timings.json; this module turns the medians into table rows. The baseline column is
the issue's target; the ratio is target / measured (above 1 = faster than needed).
"""
from __future__ import annotations

import json
import statistics
from pathlib import Path

TIMINGS = Path(__file__).resolve().parent / "out" / "browser_timings.json"

TARGETS = [
    ("click_to_updated_heatmap_60_items_ms", "click on a drop -> updated heatmap + coefficients (60 items)", 200),
    ("click_to_updated_heatmap_ms", "click on a drop -> updated heatmap (demo, 24 items)", 200),
    ("page_load_to_heatmap_ms", "page load with the demo data -> heatmap drawn", 1500),
    ("page_load_60_items_ms", "page load, 60-item pool -> heatmap drawn (information)", None),
]


def run() -> list[dict]:
    try:
        data = json.loads(TIMINGS.read_text())
    except (OSError, ValueError):
        return [{"target": "dashboard timings", "measured": "-", "baseline": "-", "ratio": None,
                 "goal": "run `make test` (browser tests) first", "ok": False}]
    rows = []
    for key, label, goal_ms in TARGETS:
        values = data.get("timings", {}).get(key)
        if not values:
            rows.append({"target": label, "measured": "not recorded", "baseline": "-", "ratio": None,
                         "goal": f"<= {goal_ms} ms" if goal_ms else "(information)", "ok": goal_ms is None})
            continue
        med = statistics.median(values)
        measured = f"{med:.0f} ms (median of {len(values)}, {data['written_at']})"
        if goal_ms is None:  # issue 5 sets the page-load target for the demo data only
            rows.append({"target": label, "measured": measured, "baseline": "-", "ratio": None,
                         "goal": "(information)", "ok": True})
            continue
        rows.append({"target": label, "measured": measured, "baseline": f"{goal_ms} ms target",
                     "ratio": goal_ms / med, "goal": f"<= {goal_ms} ms", "ok": med <= goal_ms})
    return rows
