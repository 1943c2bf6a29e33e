"""The Python face (``scalewright.analyse``) and the ``scalewright analyse`` command, against the HTTP API."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server import analyse
from server.api.serialize import to_jsonable
from server.stats.errors import InputError

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"
RESPONSES, CODEBOOK = DEMO / "workshop_responses.csv", DEMO / "workshop_codebook.csv"
READING = {"missing_codes": [-9.0], "id_column": "respondent"}
SETTINGS = {"n_factors": 3, "rotation": "promax", "pa_iterations": 50}  # few draws: the test stays quick


def _without_id(answer: dict) -> dict:
    """The answer less the dataset id (the store's id over HTTP, the file name here)."""
    out = dict(answer)
    out["dataset"] = {k: v for k, v in answer["dataset"].items() if k != "id"}
    return out


def _http(client, raw: bytes, filename: str, codebook: Path | None = None, form: dict | None = None,
          settings: dict | None = None) -> dict:
    files = {"file": (filename, raw, "text/csv")}
    if codebook is not None:
        files["codebook"] = (codebook.name, codebook.read_bytes(), "text/csv")
    r = client.post("/api/datasets", files=files, data=form or {})
    assert r.status_code == 201, r.text
    out = client.post(f"/api/datasets/{r.json()['id']}/analysis", json=settings or {})
    assert out.status_code == 200, out.text
    return out.json()


def _frame() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    common = rng.standard_normal((120, 1))
    answers = np.clip(np.round(3 + common + 0.8 * rng.standard_normal((120, 6))), 1, 5).astype(int)
    frame = pd.DataFrame(answers, columns=[f"Q{j + 1}" for j in range(6)])
    frame.insert(0, "respondent", [f"P{i:03d}" for i in range(120)])
    return frame


def test_analyse_a_dataframe_equals_the_http_answer_for_the_same_table(client, tmp_path):
    frame = _frame()
    raw = frame.to_csv(index=False).encode()
    over_http = _http(client, raw, "responses.csv", settings={"pa_iterations": 50})
    answer = analyse(frame, pa_iterations=50)
    assert answer.reliability.result.k == 6  # the ID column is set aside as for an upload
    assert _without_id(to_jsonable(answer)) == _without_id(over_http)
    path = tmp_path / "responses.csv"
    path.write_bytes(raw)
    assert _without_id(to_jsonable(analyse(path, pa_iterations=50))) == _without_id(over_http)


def test_analyse_the_demo_files_equals_the_http_answer(client):
    over_http = _http(client, RESPONSES.read_bytes(), RESPONSES.name, CODEBOOK,
                      form={"missing_codes": "-9", "id_column": "respondent"}, settings=SETTINGS)
    answer = analyse(str(RESPONSES), codebook=CODEBOOK, **READING, **SETTINGS)
    assert answer.settings.rotation == "promax" and answer.settings.n_factors == 3
    assert _without_id(to_jsonable(answer)) == _without_id(over_http)


def test_an_unknown_setting_is_refused_by_name():
    with pytest.raises(InputError) as err:
        analyse(_frame(), n_factor=2)
    assert err.value.code == "unknown_setting"
    assert "n_factor" in err.value.message


def test_a_missing_file_is_an_input_error_naming_it(tmp_path):
    with pytest.raises(InputError) as err:
        analyse(tmp_path / "nothing.csv")
    assert err.value.code == "file_not_found"
    assert "nothing.csv" in err.value.message


def _cli(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """``scalewright ...`` as installed (``python -m scalewright``), run outside the checkout."""
    return subprocess.run([sys.executable, "-m", "scalewright", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=300)


@pytest.mark.slow
def test_cli_json_equals_the_http_answer(client, tmp_path):
    over_http = _http(client, RESPONSES.read_bytes(), RESPONSES.name, CODEBOOK,
                      form={"missing_codes": "-9", "id_column": "respondent"}, settings=SETTINGS)
    run = _cli("analyse", str(RESPONSES), "--codebook", str(CODEBOOK), "--missing-codes=-9",
               "--id-column", "respondent", "--n-factors", "3", "--rotation", "promax", "--pa-iterations", "50",
               "--json", cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    assert _without_id(json.loads(run.stdout)) == _without_id(over_http)


@pytest.mark.slow
def test_cli_summary_and_errors(tmp_path):
    run = _cli("analyse", str(RESPONSES), "--codebook", str(CODEBOOK), "--missing-codes=-9",
               "--id-column", "respondent", "--pa-iterations", "50", cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    assert "alpha 0.8" in run.stdout and "omega total" in run.stdout
    assert "W8 [misplaced]" in run.stdout  # the planted misplaced item (demo_data/README.md)
    assert "Missing codes -9 marked 40 cells as missing." in run.stdout
    bad = _cli("analyse", str(RESPONSES), "--items", "W1,NOPE", cwd=tmp_path)
    assert bad.returncode == 1
    assert bad.stdout == ""
    assert bad.stderr.strip().splitlines() == ["scalewright analyse: Unknown item(s): NOPE. "
                                               "The dataset has 25 items."]


def test_installed_as_scalewright_and_nothing_named_server(tmp_path):
    code = ("import importlib.util, scalewright; print(scalewright.__file__); "
            "print(importlib.util.find_spec('server'))")
    run = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=120,
                         env={"PATH": "/usr/bin:/bin"})
    assert run.returncode == 0, run.stderr
    where, server_spec = run.stdout.splitlines()
    assert Path(where) == ROOT / "server" / "__init__.py"
    assert server_spec == "None"
