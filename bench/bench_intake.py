"""Loading a large response file (issue 2 speed target): 200,000 respondents x 100 items must stay under 2 GB.

A seeded CSV of 1-5 answers with an ID column (~48 MB) is written to a temporary folder; each reader runs
in its own child process so ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` is that reader's peak memory
(including the Python interpreter and its imports). Baseline: ``pandas.read_csv`` with its defaults on
the same file, the straightforward way to load it.
"""
from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

N_ROWS = 200_000
N_ITEMS = 100
GOAL_MB = 2048.0
ROOT = Path(__file__).resolve().parent.parent

_CHILD = r"""
import json, resource, sys, time
sys.path.insert(0, sys.argv[3])
path, which = sys.argv[1], sys.argv[2]
import numpy, pandas
if which == "intake":
    from server.intake import read_responses
start = time.perf_counter()
if which == "intake":
    raw = open(path, "rb").read()
    d = read_responses(raw, "big.csv", scale_min=1, scale_max=5)
    shape = list(d.responses.shape)
else:
    df = pandas.read_csv(path)
    shape = list(df.shape)
seconds = time.perf_counter() - start
print(json.dumps({"seconds": seconds, "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "shape": shape}))
"""


def write_csv(path: Path, n_rows: int = N_ROWS, n_items: int = N_ITEMS, seed: int = 20261202) -> int:
    """A seeded CSV: ``id`` (r0000001...) then ``q1..q{n_items}`` with answers 1-5. Returns its size."""
    rng = np.random.default_rng(seed)
    header = ("id," + ",".join(f"q{j + 1}" for j in range(n_items)) + "\n").encode()
    with open(path, "wb") as fh:
        fh.write(header)
        for start in range(0, n_rows, 20_000):
            rows = min(20_000, n_rows - start)
            block = np.empty((rows, 2 * n_items), dtype=np.uint8)
            block[:, 0::2] = rng.integers(1, 6, size=(rows, n_items), dtype=np.uint8) + ord("0")
            block[:, 1::2] = ord(",")
            block[:, -1] = ord("\n")
            ids = np.array([f"r{i:07d},".encode() for i in range(start + 1, start + rows + 1)], dtype="S9")
            prefix = np.frombuffer(ids.tobytes(), dtype=np.uint8).reshape(rows, 9)
            fh.write(np.hstack([prefix, block]).tobytes())
    return path.stat().st_size


def _child(path: Path, which: str) -> dict:
    out = subprocess.run([sys.executable, "-c", _CHILD, str(path), which, str(ROOT)], check=False,
                         capture_output=True,
                         text=True, timeout=900)
    if out.returncode != 0:
        raise RuntimeError(f"{which} child failed: {out.stderr.strip().splitlines()[-1:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def run() -> list[dict]:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "big.csv"
        size = write_csv(path)
        ours = _child(path, "intake")
        base = _child(path, "pandas")
    if ours["shape"] != [N_ROWS, N_ITEMS]:
        raise RuntimeError(f"read_responses returned shape {ours['shape']}")
    label = f"load {N_ROWS:,} x {N_ITEMS} CSV ({size / 1e6:.0f} MB)"
    return [
        {"target": f"{label}: peak memory", "measured": f"{ours['peak_mb']:.0f} MB",
         "baseline": f"pandas.read_csv default {base['peak_mb']:.0f} MB",
         "ratio": ours["peak_mb"] / base["peak_mb"], "goal": f"< {GOAL_MB:.0f} MB",
         "ok": ours["peak_mb"] < GOAL_MB},
        {"target": f"{label}: time", "measured": f"{ours['seconds']:.1f} s",
         "baseline": f"pandas.read_csv default {base['seconds']:.1f} s",
         "ratio": ours["seconds"] / base["seconds"], "goal": "informational (validation costs time)",
         "ok": True},
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
