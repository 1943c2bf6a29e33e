"""The engine on its own (no HTTP): loading, caching, settings, and one analysis going down the layers."""
from __future__ import annotations

import io
import subprocess
import sys
import threading

import pytest

from server.analysis import AnalysisAnswer, AnalysisSettings
from server.analysis import factors as factors_section
from server.engine import Engine
from server.errors import NotFound
from server.stats.errors import InputError
from server.store import SQLiteStore


@pytest.fixture
def engine_and_id(tmp_path, holzinger):
    store = SQLiteStore(tmp_path / "data")
    buf = io.StringIO()
    holzinger.to_csv(buf, index=False)
    record = store.add_dataset(name="hs", raw=buf.getvalue().encode(), filename="hs.csv", options={})
    return Engine(store), record["id"]


def test_an_unknown_dataset_is_a_domain_not_found(engine_and_id):
    engine, _ = engine_and_id
    with pytest.raises(NotFound) as err:
        engine.analyse("nope")
    assert (err.value.kind, err.value.ident) == ("dataset", "nope")


def test_settings_are_checked_against_the_dataset(engine_and_id):
    engine, ds = engine_and_id
    s = engine.settings(ds, {"items": ["x9", "x1", "x2"]})
    assert isinstance(s, AnalysisSettings) and s.items == ("x1", "x2", "x9")
    with pytest.raises(InputError) as err:
        engine.settings(ds, {"items": ["x1", "nope"]})
    assert err.value.code == "unknown_item"


def test_answers_are_cached_per_canonical_settings(engine_and_id):
    engine, ds = engine_and_id
    assert not engine.has_answer(ds)
    first = engine.analyse(ds, {"items": ["x1", "x2", "x3", "x4"]})
    assert isinstance(first, AnalysisAnswer)
    assert engine.analyse(ds, engine.settings(ds, {"items": ["x4", "x3", "x2", "x1"]})) is first
    assert engine.has_answer(ds, {"items": ["x2", "x1", "x3", "x4"]})
    engine.forget(ds)
    assert not engine.has_answer(ds, {"items": ["x1", "x2", "x3", "x4"]})


def test_one_analysis_never_calls_the_engine_back(engine_and_id, monkeypatch):
    engine, ds = engine_and_id
    calls = {"analyse": 0, "reference": 0}
    real_analyse, real_reference = Engine.analyse, factors_section.reference_solution

    def counting_analyse(self, *a, **k):
        calls["analyse"] += 1
        return real_analyse(self, *a, **k)

    def counting_reference(*a, **k):
        calls["reference"] += 1
        return real_reference(*a, **k)

    monkeypatch.setattr(Engine, "analyse", counting_analyse)
    monkeypatch.setattr(factors_section, "reference_solution", counting_reference)
    for drop in ("x1", "x5"):  # two subsets, both lined up with the full pool's 3-factor solution
        keep = [f"x{i}" for i in range(1, 10) if f"x{i}" != drop]
        answer = engine.analyse(ds, {"items": keep, "n_factors": 3})
        assert answer.factors.efa.result.match.startswith("Factors were matched to the previous solution")
    assert calls == {"analyse": 2, "reference": 1}  # no re-entry; the reference is computed once and cached


def test_reliability_only_answer_has_no_factor_sections(engine_and_id):
    engine, ds = engine_and_id
    answer = engine.reliability(ds, {})
    assert answer.factors is None and answer.reliability.n_items == 9


def test_concurrent_identical_requests_compute_once(engine_and_id, monkeypatch):
    engine, ds = engine_and_id
    import server.engine as engine_module

    runs = []
    real_run = engine_module.run
    monkeypatch.setattr(engine_module, "run", lambda *a, **k: runs.append(1) or real_run(*a, **k))
    out = []
    threads = [threading.Thread(target=lambda: out.append(engine.analyse(ds, {"n_factors": 2}))) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(runs) == 1 and all(a is out[0] for a in out)


def test_the_core_imports_nothing_from_the_api():
    code = ("import sys, server.engine, server.analysis, server.stats.efa; "
            "print(sorted(m for m in sys.modules if m.startswith(('server.api', 'fastapi'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_no_lower_layer_names_the_api_even_inside_a_function():
    import re
    from pathlib import Path

    import server

    root = Path(server.__file__).parent
    lower = [root / "engine.py", *(root / "analysis").glob("*.py"), *(root / "stats").glob("*.py")]
    imports_api = re.compile(r"^\s*(from\s+(\.+api|server\.api)\b|import\s+server\.api\b)", re.MULTILINE)
    assert [p.name for p in lower if imports_api.search(p.read_text())] == []


def test_a_drop_reuses_the_other_subscales_blocks_and_answers_as_a_fresh_engine(tmp_path):
    # the demo pool: three codebook constructs; dropping a 'welcome' item changes only that subscale's matrices
    from pathlib import Path

    from server.store import Store

    demo = Path(__file__).resolve().parent.parent / "demo_data"
    store = Store(tmp_path)
    raw, cb = (demo / "workshop_responses.csv").read_bytes(), (demo / "workshop_codebook.csv").read_bytes()
    rec = store.add_dataset(name="demo", raw=raw, filename="workshop_responses.csv", codebook_raw=cb,
                            codebook_filename="workshop_codebook.csv", options={"id_column": "respondent"},
                            meta={})
    engine = Engine(store)
    whole = engine.analyse(rec["id"], {})
    items = [n for n in whole.settings.items if n != "W1"]
    dropped = engine.analyse(rec["id"], {"items": items})
    assert set(whole.constructs) == set(dropped.constructs) == {"welcome", "contribution", "ownership"}
    assert dropped.constructs["contribution"].result is whole.constructs["contribution"].result  # reused
    assert dropped.constructs["welcome"].result is not whole.constructs["welcome"].result  # refitted
    fresh = Engine(store).analyse(rec["id"], {"items": items})  # nothing memoised
    for c in dropped.constructs:
        assert dropped.constructs[c].to_dict() == fresh.constructs[c].to_dict()  # r_other refreshed too
    assert dropped.constructs["contribution"].to_dict() != whole.constructs["contribution"].to_dict()  # r_other
