"""Made ``v1_data/`` with the code of commit c7dc338 (schema version 1); see README.md.

Run against a worktree of that commit: ``PYTHONPATH=<worktree> python make_v1_data.py OUT_DIR``.
"""
import random
import shutil
import sqlite3
import sys
from pathlib import Path

from fastapi.testclient import TestClient

import server
from server.app import create_app
from server.settings import Settings

print("server from", server.__file__, "version", server.__version__)
out = Path(sys.argv[1])
shutil.rmtree(out, ignore_errors=True)
rng = random.Random(9)  # 12 invented respondents x 4 items on a 1-5 scale
rows = ["id,Q1,Q2,Q3,Q4"]
for i in range(1, 13):
    base = rng.randint(1, 5)
    rows.append(f"r{i}," + ",".join(str(min(5, max(1, base + rng.randint(-1, 1)))) for _ in range(4)))
csv = ("\n".join(rows) + "\n").encode()
with TestClient(create_app(Settings(data_dir=out))) as c:
    r = c.post("/api/datasets", files={"file": ("pilot.csv", csv, "text/csv")}, data={"name": "v1 pilot"})
    assert r.status_code == 201, r.text
    ds = r.json()
    body = {"name": "v1 snapshot", "author": "fixture", "items": ["Q1", "Q2", "Q3"],
            "removed": [{"item": "Q4", "reason": "fixture removal", "code": "other"}]}
    r = c.post(f"/api/datasets/{ds['id']}/snapshots", json=body)
    assert r.status_code == 201, r.text
    print("dataset", ds["id"], "snapshot", r.json()["id"], "sha256", ds["sha256"])
# The same tables and rows in fewer bytes, and no -wal/-shm files left beside the database.
con = sqlite3.connect(out / "scalewright.sqlite3")
con.execute("PRAGMA journal_mode=DELETE")
con.execute("PRAGMA page_size=512")
con.execute("VACUUM")
con.execute("PRAGMA journal_mode=WAL")
con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
con.close()
