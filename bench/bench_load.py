"""Under load (issue 14): 20 clients at once, each making 100 drops on 60 items x 5,000 respondents.

Starts the real server (``python -m server serve``) on an empty data folder, uploads a 3-factor pool of 60
items x 5,000 respondents (the same generator as bench_dashboard), then:

- single client: 20 drops one after another, each a set of active items never asked before (2 to 10 items
  left out at random, so the answer cache is cold; parallel analysis' random-data thresholds depend only on
  the number of items and are warmed for every count first, as a session's first drops would have);
- 20 clients at once (threads on loopback, each with its own connection, each waiting for its answer before
  its next drop: a closed loop, so at most 20 requests are in the server at any time), 100 such drops each.

Reported: errors (any status but 200, any exception), the median and the 95th percentile of the
20-client latencies against the single client's median. Nothing is cached between the two parts but the
thresholds: every item set of the run is new.
"""
from __future__ import annotations

import statistics
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

CLIENTS, DROPS, SINGLE = 20, 100, 20
K, N = 60, 5000
GOAL = 5.0


def _item_sets(names: list[str], count: int, seed: int, seen: set) -> list[list[str]]:
    rng = np.random.default_rng(seed)
    out = []
    while len(out) < count:
        gone = rng.choice(len(names), size=int(rng.integers(2, 11)), replace=False)
        key = frozenset(int(g) for g in gone)
        if key in seen:
            continue
        seen.add(key)
        out.append([n for j, n in enumerate(names) if j not in key])
    return out


def run() -> list[dict]:
    import httpx

    from bench.bench_dashboard import pool_csv
    from tests.serverproc import running_server

    with tempfile.TemporaryDirectory() as tmp, running_server(Path(tmp) / "d") as (_, base):
        r = httpx.post(f"{base}/api/datasets", files={"file": ("pool60.csv", pool_csv(K, n=N))}, timeout=600)
        r.raise_for_status()
        ds = r.json()["id"]
        url = f"{base}/api/datasets/{ds}/analysis"
        names = [f"q{j + 1}" for j in range(K)]
        first = httpx.post(url, json={}, timeout=600)
        first.raise_for_status()
        names = list(first.json()["settings"]["items"])
        seen: set = set()
        for k in range(K - 10, K - 1):  # thresholds of every item count the drops reach
            httpx.post(url, json={"items": names[:k]}, timeout=600).raise_for_status()
            seen.add(frozenset(range(k, K)))

        def timed(client, items) -> float | None:
            t = time.perf_counter()
            try:
                resp = client.post(url, json={"items": items}, timeout=600)
            except httpx.HTTPError:
                return None
            return time.perf_counter() - t if resp.status_code == 200 else None

        with httpx.Client(trust_env=False) as c:
            single = [timed(c, items) for items in _item_sets(names, SINGLE, 0, seen)]
        single_ok = [t for t in single if t is not None]
        plans = [_item_sets(names, DROPS, 100 + i, seen) for i in range(CLIENTS)]
        lat: list[float] = []
        errors = [0]
        lock = threading.Lock()
        start = threading.Barrier(CLIENTS)

        def client(plan):
            with httpx.Client(trust_env=False) as c:
                start.wait()
                for items in plan:
                    t = timed(c, items)
                    with lock:
                        if t is None:
                            errors[0] += 1
                        else:
                            lat.append(t)

        threads = [threading.Thread(target=client, args=(p,)) for p in plans]
        t0 = time.perf_counter()
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        wall = time.perf_counter() - t0

    d1 = statistics.median(single_ok) if single_ok else float("nan")
    p95 = float(np.percentile(lat, 95)) if lat else float("inf")
    p50 = statistics.median(lat) if lat else float("inf")
    n_err = errors[0] + (len(single) - len(single_ok))
    return [{"target": f"{CLIENTS} clients x {DROPS} drops at once, {K} x {N:,} (new item sets, loopback)",
             "measured": f"p95 {p95 * 1000:.0f} ms, median {p50 * 1000:.0f} ms, {n_err} errors, "
                         f"{len(lat)} answers in {wall:.0f} s",
             "baseline": f"{d1 * 1000:.0f} ms (one client, median of {len(single_ok)})",
             "ratio": p95 / d1 if d1 == d1 and d1 > 0 else None,
             "goal": f"no error, p95 <= {GOAL:g}x one client's drop",
             "ok": n_err == 0 and p95 <= GOAL * d1}]


if __name__ == "__main__":
    for row in run():
        print(row)
