"""The analyses whose numbers must not move when the computation is made faster (issue 14).

``python -m tests.analysis.numbers_cases OUT.json.gz`` writes every number and label of these answers (the API's
JSON, flattened to ``path -> value``, floats to ten significant digits; the correlation matrix, an input of
every solver rather than a result, is left out); tests/analysis/test_numbers_unchanged.py compares the current
code with the file written by the code before the speed work (tests/reference/numbers/, with the commit named
in its ``written_by`` field).
"""
from __future__ import annotations

import gzip
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
# fields that say how a number was reached, not what it is (solver steps and names, timings, ids)
VOLATILE = {"iterations", "n_iter", "nit", "evals", "elapsed_ms", "computed_at", "dataset_id", "id", "method_detail",
            "solver", "cache", "timings"}


def pool_250(n: int = 1500, k: int = 250, m: int = 4, seed: int = 250) -> pd.DataFrame:
    """A simulated 250-item pool: m correlated factors, items cycling over them, answers 1-5."""
    rng = np.random.default_rng(seed)
    L = np.zeros((k, m))
    for j in range(k):
        L[j, j % m] = rng.uniform(0.4, 0.75)
        if j % 9 == 0:
            L[j, (j + 1) % m] = rng.uniform(0.2, 0.35)  # some cross-loaders
    phi = np.full((m, m), 0.3) + 0.7 * np.eye(m)
    F = rng.multivariate_normal(np.zeros(m), phi, size=n)
    uniq = np.sqrt(np.clip(1 - np.einsum("ij,jk,ik->i", L, phi, L), 0.05, None))
    Z = F @ L.T + rng.standard_normal((n, k)) * uniq
    X = np.clip(np.round(Z * 1.1 + 3), 1, 5).astype(int)
    return pd.DataFrame(X, columns=[f"p{j + 1}" for j in range(k)])


def flatten(obj, prefix: str = "", out: dict | None = None) -> dict:
    out = {} if out is None else out
    if isinstance(obj, dict):
        for key, v in obj.items():
            if key in VOLATILE:
                continue
            flatten(v, f"{prefix}/{key}", out)
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            flatten(v, f"{prefix}/{i}", out)
    elif not prefix.startswith("/correlations/matrix"):
        out[prefix] = float(f"{obj:.10g}") if isinstance(obj, float) else obj
    return out


def cases() -> dict[str, dict]:
    from server.api.serialize import to_jsonable
    from server.script import analyse

    demo_resp = ROOT / "demo_data" / "workshop_responses.csv"
    demo_book = ROOT / "demo_data" / "workshop_codebook.csv"
    book = pd.read_csv(demo_book)
    items = [n for n in book["item"]]
    out = {
        "demo": analyse(demo_resp, demo_book),
        "demo_drop2": analyse(demo_resp, demo_book, items=items[:-2]),
    }
    pool = pool_250()
    out["pool250"] = analyse(pool)
    out["pool250_drop1"] = analyse(pool, items=list(pool.columns[:-1]))
    return {name: flatten(to_jsonable(a)) for name, a in out.items()}


if __name__ == "__main__":
    import subprocess
    commit = subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True, cwd=ROOT).stdout.strip()
    data = {"written_by": commit, "cases": cases()}
    Path(sys.argv[1]).write_bytes(gzip.compress(json.dumps(data, sort_keys=True, separators=(",", ":")).encode(), 9,
                                                mtime=0))
