"""Respondents do not matter (issue 14): drop time, intake memory and intake time at large n.

* Drop: a cold drop that lowers the item count (60 -> 59 -> ... -> 55, three-factor data, Pearson, defaults)
  on 1,000,000 x 60 against the same drop on 5,000 x 60, alternately, both through ``Engine`` after the
  dataset's first analysis; medians of 5.
* Upload memory: ``read_responses`` of the 1,000,000 x 60 CSV (120 MB) in a child process; peak growth
  of VmHWM (/proc/self/status) from before the file's bytes are read, against its float64 matrix (480 MB).
  A second child then also runs the dataset's first analysis (``Engine.analyse``, defaults: full-pool
  matrices, descriptives, answer patterns), as when the page opens it after the upload.
* Intake time: ``read_responses`` of a 200,000 x 100 CSV with an ID column against ``pandas.read_csv`` of
  the same file (defaults), alternately in one child process, medians of 3.

The CSV files are generated in a temporary folder within the run (about 5 s for the large one) and
deleted at its end; nothing is carried over from an earlier run.
"""
from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
BIG = (1_000_000, 60)
SMALL = (5_000, 60)
DROPS = 5

_MEMORY_CHILD = r"""
import json, sys
sys.path.insert(0, sys.argv[2])
import server
from server.intake import read_responses

def hwm():
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024

before = hwm()
raw = open(sys.argv[1], "rb").read()
d = read_responses(raw, "big.csv", scale_min=1, scale_max=5)
intake = hwm() - before
if sys.argv[3:] == ["analyse"]:  # then the dataset's first analysis, as when the page opens it after the upload
    import tempfile
    from pathlib import Path
    from server.engine import Engine
    from server.store import Store
    with tempfile.TemporaryDirectory() as tmp:
        store = Store(Path(tmp) / "store")
        rec = store.add_dataset(name="big", raw=raw, filename="big.csv", codebook_raw=None, codebook_filename=None,
                                options={"scale_min": 1, "scale_max": 5}, meta={"n_rows": d.n_rows})
        del raw
        engine = Engine(store)
        engine._datasets[rec["id"]] = d
        engine.analyse(rec["id"], {})
print(json.dumps({"growth": intake, "total": hwm() - before, "matrix": d.responses.nbytes,
                  "shape": list(d.responses.shape)}))
"""

_TIME_CHILD = r"""
import json, sys, time
sys.path.insert(0, sys.argv[2])
import server
import pandas
from server.intake import read_responses
ours, plain = [], []
for _ in range(3):
    t = time.perf_counter()
    raw = open(sys.argv[1], "rb").read()
    d = read_responses(raw, "big.csv", scale_min=1, scale_max=5)
    ours.append(time.perf_counter() - t)
    del raw, d
    t = time.perf_counter()
    df = pandas.read_csv(sys.argv[1])
    plain.append(time.perf_counter() - t)
    del df
print(json.dumps({"ours": sorted(ours)[1], "pandas": sorted(plain)[1]}))
"""


def write_csv(path: Path, n: int, k: int, seed: int = 7) -> int:
    """Three-factor 1-5 answers (loadings 0.5-0.8, as bench_engine's ``_csv``), written a block at a time."""
    rng = np.random.default_rng(seed)
    m = 3
    load = np.zeros((k, m))
    for j in range(k):
        load[j, j % m] = rng.uniform(0.5, 0.8)
    noise = np.sqrt(1 - (load ** 2).sum(1))
    with open(path, "wb") as fh:
        fh.write((",".join(f"q{j + 1}" for j in range(k)) + "\n").encode())
        for start in range(0, n, 50_000):
            rows = min(50_000, n - start)
            z = rng.standard_normal((rows, m)) @ load.T + rng.standard_normal((rows, k)) * noise
            x = np.clip(np.round(z * 1.1 + 3), 1, 5).astype(np.uint8)
            block = np.full((rows, 2 * k), ord(","), dtype=np.uint8)
            block[:, 0::2] = x + ord("0")
            block[:, -1] = ord("\n")
            fh.write(block.tobytes())
    return path.stat().st_size


def _child(code: str, path: Path, *extra: str) -> dict:
    out = subprocess.run([sys.executable, "-c", code, str(path), str(ROOT), *extra], check=False, capture_output=True,
                         text=True, timeout=1800, cwd=ROOT)
    if out.returncode != 0:
        raise RuntimeError(f"child failed: {out.stderr.strip().splitlines()[-1:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def _engine(path: Path, tmp: Path):
    """An engine holding the file's dataset after its first analysis, and the dataset's id and item names."""
    from server.engine import Engine
    from server.intake import read_responses
    from server.store import Store

    store = Store(tmp / path.stem)
    raw = path.read_bytes()
    parsed = read_responses(raw, path.name, scale_min=1, scale_max=5)
    rec = store.add_dataset(name=path.stem, raw=raw, filename=path.name, codebook_raw=None, codebook_filename=None,
                            options={"scale_min": 1, "scale_max": 5}, meta={"n_rows": parsed.n_rows})
    del raw
    engine = Engine(store)
    engine._datasets[rec["id"]] = parsed  # parsing is measured by the intake rows, not here
    engine.analyse(rec["id"], {})  # the first analysis: full-pool matrices and answer patterns
    return engine, rec["id"], [it.name for it in parsed.items]


def _drops(small: Path, big: Path, tmp: Path) -> tuple[float, float]:
    """Median server time of cold drops lowering k, small and big pools alternately (same k, same load)."""
    engines = [_engine(small, tmp), _engine(big, tmp)]
    times: list[list[float]] = [[], []]
    for d in range(1, DROPS + 1):
        for i, (engine, ds, names) in enumerate(engines):
            for e, _, _ in engines:  # background work of the other pool must not run into this timing
                getattr(e, "prefetch_idle", lambda: None)()
            t = time.perf_counter()
            engine.analyse(ds, {"items": names[:-d]})  # k decreases: nothing of this k is cached
            times[i].append(time.perf_counter() - t)
    return float(np.median(times[0])), float(np.median(times[1]))


def run() -> list[dict]:
    from bench.bench_intake import write_csv as write_with_ids

    with tempfile.TemporaryDirectory() as tmp_:
        tmp = Path(tmp_)
        big, small = tmp / "big.csv", tmp / "small.csv"
        big_size = write_csv(big, *BIG)
        write_csv(small, *SMALL)
        mem = _child(_MEMORY_CHILD, big)
        first = _child(_MEMORY_CHILD, big, "analyse")
        t_small, t_big = _drops(small, big, tmp)
        wide = tmp / "wide.csv"
        wide_size = write_with_ids(wide, 200_000, 100)
        times = _child(_TIME_CHILD, wide)
    ratio_drop = t_big / t_small
    ratio_mem = mem["growth"] / mem["matrix"]
    ratio_first = first["total"] / first["matrix"]
    ratio_time = times["ours"] / times["pandas"]
    return [
        {"target": f"cold drop (k 60 -> {BIG[1] - DROPS}, 3 factors) at {BIG[0]:,} x {BIG[1]} respondents",
         "measured": f"{t_big * 1000:.0f} ms", "baseline": f"{t_small * 1000:.0f} ms at {SMALL[0]:,} x {SMALL[1]}",
         "ratio": ratio_drop, "goal": "<= 1.2x", "ok": ratio_drop <= 1.2},
        {"target": f"intake peak memory, {BIG[0]:,} x {BIG[1]} CSV ({big_size / 1e6:.0f} MB)",
         "measured": f"{mem['growth'] / 2 ** 20:.0f} MB",
         "baseline": f"float64 matrix {mem['matrix'] / 2 ** 20:.0f} MB",
         "ratio": ratio_mem, "goal": "<= 2x", "ok": ratio_mem <= 2.0 and mem["shape"] == list(BIG)},
        {"target": f"intake and first analysis peak memory, {BIG[0]:,} x {BIG[1]}",
         "measured": f"{first['total'] / 2 ** 20:.0f} MB",
         "baseline": f"float64 matrix {first['matrix'] / 2 ** 20:.0f} MB",
         "ratio": ratio_first, "goal": "<= 2x", "ok": ratio_first <= 2.0 and first["shape"] == list(BIG)},
        {"target": f"intake time, 200,000 x 100 CSV with IDs ({wide_size / 1e6:.0f} MB)",
         "measured": f"{times['ours']:.2f} s", "baseline": f"pandas.read_csv {times['pandas']:.2f} s",
         "ratio": ratio_time, "goal": "<= 2x", "ok": ratio_time <= 2.0},
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
