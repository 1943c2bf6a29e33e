"""POST /api/datasets/{id}/confirmation end to end (issue 13, item 2): Holzinger-Swineford, demo data, errors.

Sources: lavaan's widely reproduced three-factor fit of Holzinger & Swineford (1939) (from memory), semopy 2.3
on the copy of the data it ships (the reference library); demo_data/README.md for the demo constructs.
"""
from __future__ import annotations

import io
import warnings

import pandas as pd
import pytest

from server.demo import ensure_demo_loaded

HS_STRUCTURE = {"visual": ["x1", "x2", "x3"], "textual": ["x4", "x5", "x6"], "speed": ["x7", "x8", "x9"]}


def _upload(client, frame: pd.DataFrame) -> str:
    buf = io.StringIO()
    frame.to_csv(buf, index=False)
    r = client.post("/api/datasets", files={"file": ("hs.csv", buf.getvalue().encode(), "text/csv")})
    assert r.status_code == 201, r.text
    return r.json()["id"]


def confirm(client, ds: str, **body) -> dict:
    r = client.post(f"/api/datasets/{ds}/confirmation", json=body)
    assert r.status_code == 200, r.text
    return r.json()


@pytest.fixture
def demo(app, client) -> str:
    return ensure_demo_loaded(app.state.store)


def test_holzinger_three_factor_fit(client, holzinger):
    ds = _upload(client, holzinger)
    out = confirm(client, ds, structure=HS_STRUCTURE, split=None)
    f = out["fit"]
    assert out["n_exploration"] is None and out["n_confirmation"] == out["n_confirmation_complete"] == 301
    assert out["fitted"] and out["converged"] and out["warnings"] == []
    # lavaan cfa(HS.model, data = HolzingerSwineford1939) with n = 301 in the chi-square (likelihood "normal")
    assert round(f["chisq"], 1) == 85.3  # from memory (lavaan)
    assert f["df"] == 24  # from memory (lavaan)
    assert round(f["cfi"], 3) == 0.931  # from memory (lavaan)
    assert round(f["tli"], 3) == 0.896  # from memory (lavaan)
    assert round(f["rmsea"], 3) == 0.092  # from memory (lavaan)
    assert [round(x, 3) for x in f["rmsea_ci"]] == [0.071, 0.114]  # from memory (lavaan, 90 %)
    assert round(f["srmr"], 3) == 0.065  # from memory (lavaan)
    std = {(row["factor"], row["item"]): row["std"] for row in out["loadings"]}
    assert len(std) == 9 and all(row["se"] > 0 for row in out["loadings"])
    assert round(std[("visual", "x1")], 3) == 0.772  # from memory (lavaan standardizedSolution std.all)
    assert round(std[("speed", "x9")], 3) == 0.665  # from memory (lavaan std.all)
    top = out["modification_indices"][0]
    assert (top["factor"], top["item"], round(top["mi"], 1)) == ("visual", "x9", 36.4)  # from memory (lavaan)
    assert out["cutoffs"]["rmsea"] == {"op": "<=", "value": 0.06, "source": "Hu & Bentler (1999)",
                                       "kind": "convention"}


def test_holzinger_agrees_with_semopy(client, holzinger):
    import semopy

    ds = _upload(client, holzinger)
    f = confirm(client, ds, structure=HS_STRUCTURE, split=None)["fit"]
    model = semopy.Model("visual =~ x1 + x2 + x3\ntextual =~ x4 + x5 + x6\nspeed =~ x7 + x8 + x9")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model.fit(holzinger)
        st = semopy.calc_stats(model).T["Value"]
    # semopy 2.3: chi2 = n F_min with n = 301 like ours; its optimiser stops a little higher (tests/stats/test_cfa.py)
    assert st["chi2"] == pytest.approx(f["chisq"], abs=2e-3)  # semopy calc_stats
    assert st["DoF"] == f["df"]  # semopy calc_stats
    assert st["CFI"] == pytest.approx(f["cfi"], abs=1e-5)  # semopy calc_stats
    assert st["TLI"] == pytest.approx(f["tli"], abs=1e-5)  # semopy calc_stats
    # semopy's RMSEA divides by n - 1 = 300 where ours (lavaan's) uses n = 301: equal to 3 decimals here
    assert round(st["RMSEA"], 3) == round(f["rmsea"], 3)  # semopy calc_stats


def test_demo_codebook_split_is_seeded(client, demo):
    a = confirm(client, demo, structure="codebook", split=0.5)
    assert a["n_exploration"] + a["n_confirmation"] == a["n_respondents"] == 400  # demo_data/README.md
    assert list(a["structure"]) == ["welcome", "contribution", "ownership"]  # demo_data/README.md
    assert a["fitted"] and a["congruence"] is not None and a["seed"] == 20261202  # OPTIONS' default seed
    assert confirm(client, demo, structure="codebook", split=0.5) == a
    b = confirm(client, demo, structure="codebook", split=0.5, seed=11)
    assert b["seed"] == 11 and b["fit"]["chisq"] != a["fit"]["chisq"]
    c = confirm(client, demo, structure="codebook", split=0.3)
    assert (c["n_exploration"], c["n_confirmation"]) == (120, 280)


def test_demo_exploration_structure(client, demo):
    out = confirm(client, demo, structure="exploration", n_factors=3, rotation="promax")
    assert out["structure_source"] == "exploration" and out["fitted"]
    assert sum(len(v) for v in out["structure"].values()) == 24
    assert len(out["congruence"]) == 3 and all(-1 <= c["congruence"] <= 1 for c in out["congruence"])


def test_not_identified_structure_is_a_coded_warning(client, demo):
    out = confirm(client, demo, structure={"alone": ["W1"]}, split=None)
    assert not out["fitted"] and [w["code"] for w in out["warnings"]] == ["not_identified"]
    out = confirm(client, demo, structure={"A": ["W1", "W2", "W3"], "B": ["C1"]})
    assert not out["fitted"] and "not_identified" in {w["code"] for w in out["warnings"]}
    assert out["fit"]["chisq"] is None and out["loadings"] == []


@pytest.mark.parametrize(("body", "code"), [
    ({"structure": {"F": ["W1", "W2", "Q99"]}}, "unknown_item"),
    ({"items": ["W1", "nope"]}, "unknown_item"),
    ({"structure": "exploration", "split": None}, "no_exploration_half"),
    ({"structure": "everything"}, None),
    ({"split": 1.5}, None),
    ({"rotation": "sideways"}, None),
])
def test_bad_requests_are_422(client, demo, body, code):
    r = client.post(f"/api/datasets/{demo}/confirmation", json=body)
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert set(err) == {"code", "message", "details"} and err["message"]
    if code is not None:
        assert err["code"] == code
    if code == "unknown_item":
        assert ("Q99" in err["message"]) or ("nope" in err["message"])


def test_unknown_dataset_is_404(client):
    r = client.post("/api/datasets/nope/confirmation", json={})
    assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"


def test_polychoric_settings_note_the_pearson_confirmation(client, demo):
    out = confirm(client, demo, correlation="polychoric", split=None)
    assert "confirmation_pearson" in {w["code"] for w in out["warnings"]}
