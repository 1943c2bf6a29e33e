"""The dashboard's structure: views import no other view, keep no state of their own, and no default
served by ``GET /api/options`` is copied into ``static/js``."""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from server.analysis.settings import AnalysisSettings

JS = Path(__file__).resolve().parents[1] / "static" / "js"
VIEWS = JS / "views"
HELPERS = {"dom.js"}  # the DOM helper module lives beside the views but renders no view

# import ... from "x"; import "x"; import("x")
IMPORT = re.compile(r"""(?:^\s*import\b[^"';]*?\bfrom\s*|^\s*import\s*|\bimport\s*\(\s*)["']([^"']+)["']""",
                    re.MULTILINE)
NUMBER = r"(-?(?:\d+\.?\d*|\.\d+))"


def view_files() -> list[Path]:
    return sorted(p for p in VIEWS.glob("*.js") if p.name not in HELPERS)


def imports_of(source: str) -> list[str]:
    """Module specifiers of every static and dynamic import in an ES module's source."""
    return IMPORT.findall(source)


def views_imported(path: Path, source: str) -> list[str]:
    """The views (not helper modules) that the module at ``path`` imports."""
    out = []
    for spec in imports_of(source):
        target = (path.parent / spec).resolve()
        if target.parent == VIEWS.resolve() and target.name not in HELPERS:
            out.append(target.name)
    return out


def hard_coded_defaults(source: str, options: dict) -> list[str]:
    """Served defaults written next to their name in ``source`` (``primary_min: 0.40``,
    ``["primary_min", 0.4``, ``rotation: "oblimin"``), and quoted string defaults anywhere."""
    found = []
    for entry in [*options["settings"], *options["thresholds"], *options.get("display", [])]:
        name, default = entry["name"], entry.get("default")
        if default is None or isinstance(default, bool):
            continue
        if isinstance(default, str):
            if re.search(rf"""["']{re.escape(default)}["']""", source):
                found.append(f"{name} = {default!r}")
            continue
        for m in re.finditer(rf"""\b{re.escape(name)}\b["']?\s*[:,=]\s*{NUMBER}""", source):
            if float(m.group(1)) == float(default):
                found.append(f"{name} = {m.group(1)}")
    return found


@pytest.fixture(scope="module")
def served_options() -> dict:
    """What ``GET /api/options`` serves."""
    return AnalysisSettings.describe()


def test_the_import_parser_sees_static_and_dynamic_imports():
    src = ('import { a } from "./board.js";\nimport * as x from "../state.js";\nconst m = await import("./alpha.js");\n'
           'import {\n  b,\n} from "./start.js";\nh("button", { id: "workspace-import", text: "Import" });\n')
    assert imports_of(src) == ["./board.js", "../state.js", "./alpha.js", "./start.js"]
    assert views_imported(VIEWS / "loadings.js", src) == ["board.js", "alpha.js", "start.js"]
    assert views_imported(VIEWS / "loadings.js", 'import { h } from "./dom.js";') == []


@pytest.mark.parametrize("path", view_files(), ids=lambda p: p.name)
def test_a_view_imports_no_other_view(path):
    assert views_imported(path, path.read_text(encoding="utf-8")) == [], (
        f"{path.name} imports another view; share through state.js or a helper module (labels.js, dom.js)")


@pytest.mark.parametrize("path", view_files(), ids=lambda p: p.name)
def test_a_view_renders_from_the_state_it_is_given(path):
    source = path.read_text(encoding="utf-8")
    assert re.search(r"^export (?:async )?function render\(container, state\)", source, re.MULTILINE), (
        f"{path.name} must export render(container, state)")
    held = re.findall(r"^(?:let|var)\s+(\w+)", source, re.MULTILINE)
    assert held == [], f"{path.name} keeps state in module variables {held}; it belongs in state.js"


def test_the_checker_finds_a_copied_default():
    options = {"settings": [{"name": "rotation", "default": "oblimin"}, {"name": "pa_iterations", "default": 500}],
               "thresholds": [{"name": "primary_min", "default": 0.4}]}
    copied = 'const T = [["primary_min", 0.40, "Weak"]];\nconst D = { rotation: "oblimin", pa_iterations: 500 };'
    assert sorted(hard_coded_defaults(copied, options)) == ["pa_iterations = 500", "primary_min = 0.40",
                                                            "rotation = 'oblimin'"]
    assert hard_coded_defaults('const t = state.thresholds.primary_min ?? def; q.set("rot", v);', options) == []


def test_no_served_default_is_copied_into_static_js(served_options):
    assert served_options["settings"] and served_options["thresholds"]
    copies = {}
    for path in sorted(JS.rglob("*.js")):
        found = hard_coded_defaults(path.read_text(encoding="utf-8"), served_options)
        if found:
            copies[str(path.relative_to(JS))] = found
    assert copies == {}, f"defaults copied from GET /api/options into static/js: {copies}"


def test_every_module_is_preloaded_by_the_page():
    """index.html preloads each ES module, so the browser fetches them at once, not in import waves."""
    html = (JS.parent / "index.html").read_text(encoding="utf-8")
    preloaded = set(re.findall(r'<link rel="modulepreload" href="/static/(js/[^"]+)">', html))
    modules = {str(p.relative_to(JS.parent)) for p in JS.rglob("*.js") if p.name != "main.js"}
    assert preloaded == modules
