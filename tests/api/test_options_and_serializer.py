"""GET /api/options, and the one serializer of the API edge (NaN to null, numpy values, dataclasses)."""
from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np

from server.api.serialize import dumps, to_jsonable
from server.stats.notes import Note, warning_text


def test_options_serve_settings_and_thresholds(client):
    r = client.get("/api/options")
    assert r.status_code == 200
    body = r.json()
    by = {o["name"]: o for o in body["settings"]}
    assert set(by) == {"correlation", "missing", "extraction", "rotation", "gamma", "n_factors", "pa_iterations",
                       "pa_variant", "pa_iterations_polychoric", "zero_cell_correction", "grouping", "seed"}
    assert by["seed"]["default"] == 20261202 and by["correlation"]["choices"][0] == {"value": "pearson",
                                                                                     "label": "Pearson"}
    assert {t["name"] for t in body["thresholds"]} >= {"primary_min", "cross_gap", "redundant_r"}


def test_the_served_defaults_are_the_defaults_an_empty_request_gets(client, pg_alpha_data):
    import io

    buf = io.StringIO()
    pg_alpha_data.to_csv(buf, index=False)
    ds = client.post("/api/datasets", files={"file": ("d.csv", buf.getvalue().encode(), "text/csv")}).json()["id"]
    served = {o["name"]: o["default"] for o in client.get("/api/options").json()["settings"]}
    settings = client.post(f"/api/datasets/{ds}/analysis", json={}).json()["settings"]
    assert {k: settings[k] for k in served} == served
    answer = client.post(f"/api/datasets/{ds}/analysis", json={"n_factors": 40}).json()
    assert {"code": "too_many_factors", "message": "40 factors is too many for 10 items; 5 were extracted.",
            "items": []} in answer["warnings"]


@dataclass(frozen=True)
class _Plain:
    x: float
    arr: np.ndarray
    renamed: int = field(default=1, metadata={"json": "ICC(1,1)"})


@dataclass(frozen=True)
class _Shaped:
    value: float

    def to_dict(self) -> dict:
        return {"shaped": self.value}


def test_non_finite_numbers_become_null_and_numpy_is_handled_once():
    data = {"nan": float("nan"), "inf": float("inf"), "np": np.float32("-inf"), "i": np.int64(3), "b": np.bool_(True),
            "arr": np.array([[1.0, np.nan], [np.inf, 2.0]]), "view": np.arange(6.0)[::2], "t": np.eye(2)[:, :1].T,
            1: "number key"}
    out = json.loads(dumps(data))  # strict JSON: Python's parser would refuse NaN only with parse_constant tricks
    assert out == {"nan": None, "inf": None, "np": None, "i": 3, "b": True, "arr": [[1.0, None], [None, 2.0]],
                   "view": [0.0, 2.0, 4.0], "t": [[1.0, 0.0]], "1": "number key"}
    assert b"NaN" not in dumps(data) and b"Infinity" not in dumps(data)


def test_dataclasses_by_fields_or_their_to_dict():
    out = to_jsonable([_Plain(float("nan"), np.array([1, 2])), _Shaped(0.5), Note("heywood", "Item 'a'...", ("a",))])
    assert out == [{"x": None, "arr": [1, 2], "ICC(1,1)": 1}, {"shaped": 0.5},
                   {"code": "heywood", "message": "Item 'a'...", "items": ["a"]}]


def test_warning_text_reads_objects_their_json_and_old_sentences():
    n = Note("smoothed", "The matrix was smoothed.")
    assert warning_text(n) == warning_text(to_jsonable(n)) == warning_text("The matrix was smoothed.")


def test_options_serve_the_heatmap_display_option(client):
    display = {o["name"]: o for o in client.get("/api/options").json()["display"]}
    cut = display["loading_cutoff"]
    # .30: the usual cut for a salient loading (common practice)
    assert (cut["type"], cut["default"], cut["min"], cut["max"]) == ("number", 0.3, 0.0, 1.0)
    assert cut["label"] and cut["help"]
    # a display option changes only what the page shows: an analysis request refuses it
    assert "loading_cutoff" not in {o["name"] for o in client.get("/api/options").json()["settings"]}
