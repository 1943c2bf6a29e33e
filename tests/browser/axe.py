"""Run axe-core (vendored in tests/browser/vendor/axe-core, test use only) on a playwright page.

The page's Content-Security-Policy allows no inline script, so the page must come from a browser
context opened with ``bypass_csp=True`` (the ``axe_page`` fixture of test_accessibility.py) for
``page.add_script_tag`` to run the injected copy.
"""
from __future__ import annotations

from pathlib import Path

AXE_JS = Path(__file__).resolve().parent / "vendor" / "axe-core" / "axe.min.js"
WCAG_TAGS = ["wcag2a", "wcag2aa", "wcag21a", "wcag21aa"]
SERIOUS = ("serious", "critical")


def inject(page) -> None:
    """Load axe-core into the page once (a navigation drops it; call again after goto)."""
    if not page.evaluate("() => typeof window.axe === 'object'"):
        page.add_script_tag(path=str(AXE_JS))


def run_axe(page, context=None) -> dict:
    """axe.run with the WCAG 2.0/2.1 level A and AA rules; ``context`` is a selector or axe context object."""
    inject(page)
    return page.evaluate(
        """([ctx, tags]) => axe.run(ctx ?? document, {runOnly: {type: "tag", values: tags},
                                                    resultTypes: ["violations"]})
             .then((r) => ({violations: r.violations.map((v) => ({id: v.id, impact: v.impact, help: v.help,
               targets: v.nodes.map((n) => n.target.join(" ")),
               summaries: v.nodes.map((n) => n.failureSummary || "")}))}))""",
        [context, WCAG_TAGS],
    )


def describe(violations: list[dict], shown: int = 4) -> str:
    """One readable block per rule: id, impact, help, and the first few offending selectors."""
    lines = []
    for v in violations:
        lines.append(f"[{v['impact']}] {v['id']}: {v['help']} ({len(v['targets'])} element(s))")
        for target, summary in list(zip(v["targets"], v["summaries"], strict=False))[:shown]:
            first = summary.strip().splitlines()[1:2] if summary else []
            lines.append(f"    {target}" + (f"  -- {first[0].strip()}" if first else ""))
    return "\n".join(lines)


def serious_violations(page, context=None) -> str:
    """The serious or critical WCAG A/AA violations on the page, formatted for an assert message ('' if none)."""
    found = [v for v in run_axe(page, context)["violations"] if v["impact"] in SERIOUS]
    return describe(found)
