"""Load the invented demo data (``demo_data/``) into a store on first start (``scalewright serve --demo``).

Two datasets are added, each only if no dataset of that name exists yet, so calling
:func:`ensure_demo_loaded` on every start is harmless:

* ``DEMO_NAME``: wave 1, ``workshop_responses.csv`` with ``workshop_codebook.csv``;
* ``DEMO_RETEST_NAME``: wave 2 six weeks later, ``workshop_retest.csv`` with the same codebook.

Both are read with missing code -9 and ID column ``respondent``.  The rater table
(``workshop_ratings.csv``, ``DEMO_RATINGS``) is not a response dataset; the agreement view offers it
as an example upload.
"""
from __future__ import annotations

import contextlib
import threading
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .engine import Engine
    from .store import StoreBackend

DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_data"
DEMO_RESPONSES = DEMO_DIR / "workshop_responses.csv"
DEMO_CODEBOOK = DEMO_DIR / "workshop_codebook.csv"
DEMO_RETEST = DEMO_DIR / "workshop_retest.csv"
DEMO_RATINGS = DEMO_DIR / "workshop_ratings.csv"

DEMO_NAME = "Workshop belonging (demo, wave 1)"
DEMO_RETEST_NAME = "Workshop belonging (demo, wave 2 retest)"
DEMO_OPTIONS = {"missing_codes": [-9.0], "id_column": "respondent", "scale_min": None, "scale_max": None}

_lock = threading.Lock()


def _existing(store, name: str) -> str | None:
    for record in store.list_datasets():
        if record.get("name") == name:
            return record["id"]
    return None


def _add(store, name: str, responses: Path, role: str) -> str:
    from .intake import read_responses

    raw = responses.read_bytes()
    codebook_raw = DEMO_CODEBOOK.read_bytes()
    parsed = read_responses(raw, responses.name, codebook_raw=codebook_raw,
                            codebook_filename=DEMO_CODEBOOK.name,
                            missing_codes=DEMO_OPTIONS["missing_codes"], id_column=DEMO_OPTIONS["id_column"])
    meta = parsed.meta()          # the same metadata an upload stores (routes_datasets)
    meta.pop("name", None)
    meta["demo"] = role
    record = store.add_dataset(name=name, raw=raw, filename=responses.name, codebook_raw=codebook_raw,
                               codebook_filename=DEMO_CODEBOOK.name, options=dict(DEMO_OPTIONS), meta=meta)
    # the demo's datasets enter the log like any upload (a log failure does not undo the load)
    with contextlib.suppress(Exception):
        store.audit("upload", who="demo", dataset_id=record["id"],
                    details={"name": name, "filename": responses.name, "sha256": record["sha256"],
                             "codebook_filename": DEMO_CODEBOOK.name, "codebook_sha256": record["codebook_sha256"],
                             "demo": role})
    return record["id"]


def ensure_demo_loaded(store: StoreBackend, engine: Engine | None = None) -> str:
    """Add the demo datasets to ``store`` unless datasets of those names exist; return wave 1's id.

    Parameters
    ----------
    store : server.store.Store
        Where the datasets are kept (raw files byte for byte, metadata in SQLite).
    engine : server.engine.Engine, optional
        When given, wave 1 is parsed into its cache so the first analysis answers quickly.

    Returns
    -------
    str
        The dataset id of the wave-1 demo (new or already present).
    """
    with _lock:
        first = _existing(store, DEMO_NAME) or _add(store, DEMO_NAME, DEMO_RESPONSES, "wave1")
        if _existing(store, DEMO_RETEST_NAME) is None:
            _add(store, DEMO_RETEST_NAME, DEMO_RETEST, "wave2")
    if engine is not None:
        engine.dataset(first)
    return first
