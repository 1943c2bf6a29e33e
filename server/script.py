"""The Python face: one analysis of a file or a pandas DataFrame, without the server.

:func:`analyse` hands the file (a DataFrame is written to CSV first) to an :class:`~server.engine.Engine`
over a one-file store, so it is read, checked and analysed by the same code as an upload and
``POST /api/datasets/{id}/analysis``: the answer is the :class:`~server.analysis.AnalysisAnswer` the HTTP
API serializes (``server.api.serialize.to_jsonable`` gives its JSON). Installed, the package is
``scalewright``: ``scalewright.analyse(df)``.
"""
from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, TypeAlias

import pandas as pd

from .analysis import AnalysisAnswer
from .engine import Engine
from .stats.errors import InputError

__all__ = ["Source", "analyse", "load"]

#: A response file or codebook: a path (CSV, TSV or other delimited text, XLSX) or a pandas DataFrame.
Source: TypeAlias = str | os.PathLike[str] | pd.DataFrame


def _raw(source: Source, default_name: str) -> tuple[bytes, str]:
    """The bytes and file name of ``source``; a DataFrame is written as UTF-8 CSV (a named index is a column)."""
    if isinstance(source, pd.DataFrame):
        keep_index = any(n is not None for n in source.index.names)
        return source.to_csv(index=keep_index).encode("utf-8"), default_name
    if not isinstance(source, (str, os.PathLike)):
        raise InputError(f"Give a file path or a pandas DataFrame; got {type(source).__name__}.",
                         code="bad_source", details={"type": type(source).__name__})
    path = Path(source)
    try:
        return path.read_bytes(), path.name
    except FileNotFoundError:
        raise InputError(f"The file '{path}' does not exist.", code="file_not_found",
                         details={"file": str(path)}) from None
    except OSError as exc:
        raise InputError(f"The file '{path}' could not be read ({exc.strerror or exc}).", code="unreadable_file",
                         details={"file": str(path)}) from None


class _OneFile:
    """A store holding one file in memory: the part of ``StoreBackend`` the engine reads."""

    def __init__(self, raw: bytes, filename: str, codebook_raw: bytes | None, codebook_filename: str | None,
                 options: dict[str, Any]) -> None:
        self.raw, self.codebook_raw = raw, codebook_raw
        self.record = {"id": filename, "filename": filename, "codebook_filename": codebook_filename,
                       "options": options}

    def get_dataset(self, dataset_id: str) -> dict[str, Any] | None:
        return self.record if dataset_id == self.record["id"] else None

    def read_raw(self, dataset_id: str) -> bytes:
        return self.raw

    def read_codebook(self, dataset_id: str) -> bytes | None:
        return self.codebook_raw


def load(responses: Source, codebook: Source | None = None, *, missing_codes: Sequence[float] | None = None,
         id_column: str | None = None, scale_min: float | None = None,
         scale_max: float | None = None) -> tuple[Engine, str]:
    """An engine holding one dataset read from ``responses`` (and ``codebook``), and that dataset's id.

    The engine reads the file as it reads a stored upload (``Engine.dataset``); a file it cannot read raises
    :class:`InputError` naming the file.
    """
    raw, filename = _raw(responses, "responses.csv")
    cb_raw, cb_name = _raw(codebook, "codebook.csv") if codebook is not None else (None, None)
    options = {"missing_codes": None if missing_codes is None else [float(c) for c in missing_codes],
               "id_column": id_column, "scale_min": scale_min, "scale_max": scale_max}
    engine = Engine(_OneFile(raw, filename, cb_raw, cb_name, options))
    try:
        engine.dataset(filename)
    except InputError:
        raise
    except Exception as exc:  # never a traceback for a bad file: name the file and what went wrong
        raise InputError(f"The file '{filename}' could not be read ({type(exc).__name__}: {exc}).",
                         code="unreadable_file", details={"file": filename}) from exc
    return engine, filename


def analyse(responses: Source, codebook: Source | None = None, *,
            missing_codes: Sequence[float] | None = None, id_column: str | None = None,
            scale_min: float | None = None, scale_max: float | None = None,
            **settings: Any) -> AnalysisAnswer:
    """The whole analysis of a response file or DataFrame (respondents x items), as the dashboard computes it.

    Parameters
    ----------
    responses : path or DataFrame
        A CSV/TSV/XLSX path or a DataFrame (one row per respondent; a named index becomes a column).
        Columns are classified as an upload's are: an ID column, metadata and free text are set aside,
        numeric answer columns are items.
    codebook : path or DataFrame, optional
        Columns item, text, construct, reverse, optional min and max.
    missing_codes, id_column, scale_min, scale_max
        How to read the file (the upload form's fields).
    **settings
        Analysis settings by name (``GET /api/options`` lists them: ``n_factors``, ``rotation``,
        ``correlation``...), plus ``items``, ``reverse`` and ``thresholds``. An unknown name raises
        :class:`~server.stats.errors.InputError` (code ``unknown_setting``).

    Returns
    -------
    AnalysisAnswer
        The typed answer; ``server.api.serialize.to_jsonable(answer)`` is the API's JSON for it.
    """
    engine, dataset_id = load(responses, codebook, missing_codes=missing_codes, id_column=id_column,
                              scale_min=scale_min, scale_max=scale_max)
    return engine.analyse(dataset_id, settings)


# ---------------------------------------------------------------------------------------------- command line

def _number_list(text: str) -> list[float]:
    """'-9,99' -> [-9.0, 99.0] (commas, semicolons or spaces)."""
    try:
        return [float(p) for p in text.replace(";", ",").replace(" ", ",").split(",") if p.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"give numbers separated by commas, e.g. -9,99; got '{text}'") from None


def _name_list(text: str) -> list[str]:
    return [p.strip() for p in text.split(",") if p.strip()]


def _threshold(text: str) -> tuple[str, float]:
    name, _, value = text.partition("=")
    try:
        return name.strip(), float(value)
    except ValueError:
        raise argparse.ArgumentTypeError(f"give NAME=NUMBER, e.g. cross_loading=0.35; got '{text}'") from None


def add_arguments(p: argparse.ArgumentParser) -> None:
    """The arguments of ``scalewright analyse``: the file, how to read it, and one per analysis setting."""
    from .analysis.settings import OPTIONS

    p.add_argument("file", type=Path, help="the response file (CSV, TSV or XLSX; one row per respondent)")
    p.add_argument("--codebook", type=Path, help="codebook (CSV or XLSX): item, text, construct, reverse, min, max")
    p.add_argument("--json", action="store_true", help="print the answer as the HTTP API's JSON")
    p.add_argument("--missing-codes", type=_number_list, help="answers that mean 'missing', e.g. -9,99")
    p.add_argument("--id-column", help="the column holding respondent IDs (default: recognised by name or content)")
    p.add_argument("--scale-min", type=float, help="lowest possible answer, when the codebook does not say")
    p.add_argument("--scale-max", type=float, help="highest possible answer, when the codebook does not say")
    p.add_argument("--items", type=_name_list, help="active items, separated by commas (default: all)")
    p.add_argument("--reverse", type=_name_list, help="reverse-keyed items, overriding the codebook")
    p.add_argument("--threshold", type=_threshold, action="append", metavar="NAME=VALUE",
                   help="change a flag threshold (repeatable; GET /api/options lists them)")
    for o in OPTIONS:  # one flag per analysis setting, from the settings' own table
        kind: Any = {"integer": int, "number": float}.get(o.type, str)
        default = "automatic" if o.default is None else o.default
        p.add_argument(f"--{o.name.replace('_', '-')}", dest=o.name, type=kind,
                       choices=list(o.values) if o.choices else None,
                       help=f"{o.help} (default {default})".replace("%", "%%"))


def _fmt(x: Any, digits: int = 3) -> str:
    return "n/a" if x is None else f"{x:.{digits}f}"


def summary(answer: Mapping[str, Any], reading: Sequence[str] = ()) -> str:
    """A readable summary of an answer's JSON: reliability, factors, flags per item and warnings."""
    ds, rel = answer["dataset"], answer["reliability"]
    lines = [f"{ds['name']}: {ds['n_rows']} respondents, {ds['n_items_total']} items "
             f"({rel.get('n_items', rel.get('k'))} analysed)"]
    ci = rel.get("alpha_ci") or [None, None]
    line = (f"Reliability ({rel.get('missing')} deletion): alpha {_fmt(rel.get('alpha'))} "
            f"({round(100 * rel.get('ci_level', 0.95))}% CI {_fmt(ci[0])} to {_fmt(ci[1])}), "
            f"omega total {_fmt(rel.get('omega_total'))}")
    if rel.get("omega_hierarchical") is not None:
        line += f", omega hierarchical {_fmt(rel['omega_hierarchical'])}"
    lines.append(line)
    for name, block in (answer.get("constructs") or {}).items():
        lines.append(f"  {name} ({block.get('n_items', block.get('k'))} items): alpha {_fmt(block.get('alpha'))}, "
                     f"omega {_fmt(block.get('omega_total'))}")
    retention, efa = answer.get("retention") or {}, answer.get("efa") or {}
    suggested = [f"{label} {retention[key]['n_factors']}" for key, label in (("parallel", "parallel analysis"),
                                                                          ("map", "MAP"))
                 if isinstance(retention.get(key), Mapping) and retention[key].get("n_factors") is not None]
    if suggested or efa.get("n_factors"):
        lines.append(f"Factors: suggested by {', '.join(suggested) or 'n/a'}; {efa.get('n_factors') or 'none'} "
                     f"extracted ({efa.get('method')}, {efa.get('rotation')})")
    flags = efa.get("flags") or []
    if flags:
        lines.append("Flags:")
        lines += [f"  {f.get('item')} [{f.get('kind')}] {f.get('message')}" for f in flags]
    notes = answer.get("warnings") or []
    if notes:
        lines.append("Warnings:")
        lines += [f"  [{w.get('code')}] {w.get('message')}" for w in notes]
    if reading:
        lines.append("Reading the file:")
        lines += [f"  {w}" for w in reading]
    return "\n".join(lines)


def main(args: argparse.Namespace) -> int:
    """``scalewright analyse``: the summary (or ``--json``) on stdout; an error is one line on stderr, exit 1."""
    from .analysis.settings import OPTIONS
    from .api.serialize import dumps, to_jsonable

    settings: dict[str, Any] = {o.name: getattr(args, o.name) for o in OPTIONS if getattr(args, o.name) is not None}
    for key in ("items", "reverse"):
        if getattr(args, key) is not None:
            settings[key] = getattr(args, key)
    if args.threshold:
        settings["thresholds"] = dict(args.threshold)
    try:
        engine, dataset_id = load(args.file, args.codebook, missing_codes=args.missing_codes,
                                  id_column=args.id_column, scale_min=args.scale_min, scale_max=args.scale_max)
        answer = engine.analyse(dataset_id, settings)
    except InputError as exc:
        print(f"scalewright analyse: {' '.join(exc.message.split())}", file=sys.stderr, flush=True)
        return 1
    if args.json:
        sys.stdout.buffer.write(dumps(answer) + b"\n")
        sys.stdout.flush()
    else:
        print(summary(to_jsonable(answer), engine.dataset(dataset_id).warnings), flush=True)
    return 0
