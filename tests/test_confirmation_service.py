"""The hold-out confirmation service (issue 13, item 2) without HTTP: split, structures, notes, errors.

Sources: demo_data/README.md (three constructs of eight items, W8 planted on ownership, C3 reverse-keyed).
"""
from __future__ import annotations

import numpy as np
import pytest

import server  # noqa: F401  (one BLAS thread before numpy work)
from server.api.serialize import to_jsonable
from server.confirmation import ConfirmationQuery, confirm
from server.demo import ensure_demo_loaded
from server.engine import Engine
from server.stats.errors import InputError
from server.store import Store


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store = Store(tmp_path_factory.mktemp("confirm") / "data")
    return Engine(store), ensure_demo_loaded(store)


def codes(answer) -> set[str]:
    return {w.code for w in answer.warnings}


def test_codebook_structure_on_the_held_out_half(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery())
    assert a.structure_source == "codebook" and a.fitted and a.converged
    assert list(a.structure) == ["welcome", "contribution", "ownership"]  # demo_data/README.md
    assert a.n_exploration + a.n_confirmation == a.n_respondents == 400  # demo_data/README.md: 400 respondents
    assert a.n_exploration == 200 and a.n_confirmation_complete <= a.n_confirmation
    assert a.fit["df"] == 24 * 25 // 2 - (24 + 3 + 24)  # p(p+1)/2 - (loadings + factor correlations + uniquenesses)
    # the misplaced W8 shows up as a large modification index towards ownership (demo_data/README.md)
    assert any(m.get("item") == "W8" and m.get("factor") == "ownership" for m in a.modification_indices[:3])
    # C3 is reverse-scored (codebook), so every confirmed loading is positive
    assert all(row["std"] > 0 for row in a.loadings)
    assert {c["factor"] for c in a.congruence} == {"welcome", "contribution", "ownership"}
    assert all(c["congruence"] > 0.85 for c in a.congruence)  # common practice (Lorenzo-Seva & ten Berge 2006)
    assert set(a.cutoffs) >= {"cfi", "tli", "rmsea", "srmr"} and a.cutoffs["cfi"]["kind"] == "convention"


def test_the_split_is_seeded(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery(request={"seed": 7}))
    b = confirm(engine, ds, ConfirmationQuery(request={"seed": 7}))
    c = confirm(engine, ds, ConfirmationQuery(request={"seed": 8}))
    assert to_jsonable(a) == to_jsonable(b)
    assert a.fit["chisq"] != c.fit["chisq"]


def test_exploration_structure_puts_w8_with_ownership(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery(structure="exploration"))
    assert a.structure_source == "exploration" and a.fitted
    owner = next(f for f, its in a.structure.items() if "O1" in its)
    assert "W8" in a.structure[owner]  # demo_data/README.md: W8 generated from ownership
    assert sorted(i for its in a.structure.values() for i in its) == sorted(
        [f"{c}{i}" for c in "WCO" for i in range(1, 9)])


def test_polychoric_settings_say_the_confirmation_is_pearson(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery(split=None, request={"correlation": "polychoric"}))
    assert "confirmation_pearson" in codes(a)
    assert a.n_exploration is None and a.congruence is None and a.n_confirmation == 400


def test_not_identified_structure_is_a_note(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery(structure={"alone": ["W1"]}, split=None))
    assert not a.fitted and "not_identified" in codes(a) and a.loadings == [] and a.fit["df"] == -1
    b = confirm(engine, ds, ConfirmationQuery(structure={"A": ["W1", "W2", "W3"], "B": ["C1"]}, split=None))
    assert not b.fitted and "not_identified" in codes(b) and b.fit["chisq"] is None


def test_refusals(demo):
    engine, ds = demo
    with pytest.raises(InputError) as e:
        confirm(engine, ds, ConfirmationQuery(structure={"F": ["W1", "nope"]}))
    assert e.value.code == "unknown_item" and e.value.details["items"] == ["nope"]
    with pytest.raises(InputError) as e:
        confirm(engine, ds, ConfirmationQuery(structure="exploration", split=None))
    assert e.value.code == "no_exploration_half"
    with pytest.raises(InputError) as e:
        confirm(engine, ds, ConfirmationQuery(structure={"F": ["W1", "W2", "W3"]}, request={"items": ["C1", "C2"]}))
    assert e.value.code == "inactive_item"


def test_tiny_exploration_half_is_a_note_not_a_failure(demo):
    engine, ds = demo
    a = confirm(engine, ds, ConfirmationQuery(split=0.01))
    assert a.n_exploration == 4 and a.fitted
    assert "exploration_unavailable" in codes(a) and a.congruence is None
    assert np.isfinite(a.fit["chisq"])
