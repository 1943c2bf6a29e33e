"""Resampling run (issue 13 speed target): 200 resamples of 60 items x 5,000 respondents, default settings.

Measured: a run of the run service (``server.runs.RunService``: worker processes, the plan shipped once per
worker, parallel analysis' random-data thresholds computed once, the number of factors fixed, only what the
summary reads), from ``start`` to ``done``; the time to the first progress message (the run is running) and
to the first resamples done. Baseline: the same analysis run in a loop on bootstrap resamples
(``AnalysisInputs.from_responses`` + ``analysis.pipeline.run``, what a script would do), measured for a few
resamples in the same process (half before the run, half after it, so that a slower or faster spell of a
shared machine weighs on both sides) and scaled to 200. Also: a drop answered while the run computes, against the
same drop with no run.
"""
from __future__ import annotations

import tempfile
import threading
import time

import numpy as np

B, NAIVE = 200, 6


def run() -> list[dict]:
    from bench.bench_engine import _csv
    from server.analysis.inputs import AnalysisInputs
    from server.analysis.pipeline import run as pipeline_run
    from server.engine import Engine
    from server.intake import read_responses
    from server.runs import RunService
    from server.stats.resampling import bootstrap_indices
    from server.store import Store

    with tempfile.TemporaryDirectory() as tmp:
        store = Store(tmp)
        raw = _csv()
        parsed = read_responses(raw, "bench.csv", scale_min=1, scale_max=5)
        rec = store.add_dataset(name="bench", raw=raw, filename="bench.csv", codebook_raw=None,
                                codebook_filename=None, options={"scale_min": 1, "scale_max": 5},
                                meta={"n_rows": parsed.n_rows})
        engine = Engine(store)
        ds = rec["id"]
        names = [it.name for it in engine.dataset(ds).items]
        engine.analyse(ds, {})  # the full-sample analysis is cached before both sides
        service = RunService(engine, tmp)
        service.warm()  # as create_app does: the fork server imports the analysis while the server starts

        # one drop first, so both sides below find parallel analysis' thresholds of 59 items cached and differ
        # only in the run computing beside them (each drop leaves out an item never left out before)
        engine.analyse(ds, {"items": names[1:]})
        drops = []
        for j in range(1, 4):
            engine.prefetch_idle(60)  # the engine's background work of the last answer is done on both sides
            t = time.perf_counter()
            engine.analyse(ds, {"items": [n for i, n in enumerate(names) if i != j]})
            drops.append(time.perf_counter() - t)
        drop_idle = float(np.median(drops))

        ds_obj = engine.dataset(ds)
        loop_idx = bootstrap_indices(ds_obj.n_rows, NAIVE, seed=0)

        def loop(rows) -> float:  # the analysis a script would run on each resample
            t = time.perf_counter()
            for idx in rows:
                inputs = AnalysisInputs.from_responses(ds_obj.responses[idx], ds_obj.items, [])
                pipeline_run(inputs, engine.settings(ds, {}))
            return time.perf_counter() - t

        t_loop = loop(loop_idx[:NAIVE // 2])

        first: dict[str, float] = {}
        finished = threading.Event()

        def publish(_ds, msg):
            now = time.perf_counter()
            first.setdefault("message", now)
            if msg["done"] > 0:
                first.setdefault("done", now)
            if msg["state"] not in ("queued", "running"):
                finished.set()

        t0 = time.perf_counter()
        r = service.start(ds, {}, n_resamples=B, publish=publish)
        drops = []
        for j in range(4, 7):  # drops answered while the run computes
            time.sleep(1.0)
            engine.prefetch_idle(60)
            t = time.perf_counter()
            engine.analyse(ds, {"items": [n for i, n in enumerate(names) if i != j]})
            drops.append(time.perf_counter() - t)
        drop_busy = float(np.median(drops))
        finished.wait(timeout=3600)
        t_run = time.perf_counter() - t0
        state = service.get(r.run_id).state

        t_loop += loop(loop_idx[NAIVE // 2:])
        t_naive = t_loop * B / NAIVE

    t_first = first.get("message", np.inf) - t0
    t_first_done = first.get("done", np.inf) - t0
    return [
        {"target": f"resampling run, {B} resamples of 60 x 5,000 (defaults, {service.workers} worker(s))",
         "measured": f"{t_run:.1f} s ({state})",
         "baseline": f"{t_naive:.1f} s (the analysis in a loop, {NAIVE} resamples before and after, scaled to {B})",
         "ratio": t_naive / t_run, "goal": "<= 1/4 of the loop (>= 4x)",
         "ok": state == "done" and t_run * 4 <= t_naive},
        {"target": "resampling run: time to first progress message",
         "measured": f"{t_first:.2f} s (first resamples done after {t_first_done:.2f} s)",
         "baseline": "-", "ratio": None, "goal": "<= 1 s", "ok": t_first <= 1.0},
        {"target": "whole analysis after a drop, during a resampling run",
         "measured": f"{drop_busy * 1000:.0f} ms", "baseline": f"{drop_idle * 1000:.0f} ms (no run)",
         "ratio": drop_idle / drop_busy, "goal": "as fast as without a run (<= 1.5x)",
         "ok": drop_busy <= 1.5 * drop_idle},
    ]


if __name__ == "__main__":
    for row in run():
        print(row)
