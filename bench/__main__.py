"""``python -m bench [--only NAME]``: run every bench/bench_*.py and print one table.

Each module's ``run()`` returns rows ``{"target": str, "measured": str, "baseline": str,
"ratio": float | None, "goal": str, "ok": bool}``.  A module that fails to import or run gets one
row carrying its error instead of stopping the table.  The exit code is always 0: the table is
information, not a test.
"""
from __future__ import annotations

import argparse
import importlib
import sys
import time
import traceback
from pathlib import Path

import server  # noqa: F401  (one BLAS thread, set before numpy loads)

BENCH_DIR = Path(__file__).resolve().parent
COLUMNS = ("target", "measured", "baseline", "ratio", "goal", "ok")


def discover(only: str | None = None) -> list[str]:
    """Module names ``bench_*`` in this folder, sorted; ``only`` keeps those whose topic contains it."""
    names = sorted(p.stem for p in BENCH_DIR.glob("bench_*.py"))
    if only:
        want = only.removeprefix("bench_").lower()
        names = [n for n in names if want in n.removeprefix("bench_").lower()]
    return names


def _cell(row: dict, key: str) -> str:
    value = row.get(key)
    if value is None:
        return "-"
    if key == "ratio":
        try:
            return f"{float(value):.1f}x"
        except (TypeError, ValueError):
            return str(value)
    if key == "ok":
        return "yes" if value is True else ("NO" if value is False else str(value))
    return " ".join(str(value).split())


def run_module(name: str) -> list[dict]:
    """Import ``bench.<name>`` and call its ``run()``; on any failure return one row naming the error."""
    try:
        module = importlib.import_module(f"bench.{name}")
        rows = list(module.run())
        bad = [r for r in rows if not isinstance(r, dict)]
        if bad:
            raise TypeError(f"run() returned {type(bad[0]).__name__}, expected dict rows")
        return rows
    except Exception as exc:  # noqa: BLE001 - any failure becomes a row, the table goes on
        last = traceback.extract_tb(exc.__traceback__)[-1] if exc.__traceback__ else None
        where = f" ({Path(last.filename).name}:{last.lineno})" if last else ""
        return [{"target": name, "measured": f"ERROR {type(exc).__name__}: {exc}{where}",
                 "baseline": "", "ratio": None, "goal": "", "ok": False}]


def format_table(rows: list[dict]) -> str:
    cells = [[_cell(r, k) for k in COLUMNS] for r in rows]
    widths = [max([len(c)] + [len(row[i]) for row in cells]) for i, c in enumerate(COLUMNS)]

    def line(values: list[str]) -> str:
        return " | ".join(v.ljust(w) for v, w in zip(values, widths)).rstrip()

    out = [line(COLUMNS), "-+-".join("-" * w for w in widths)]
    out += [line(row) for row in cells]
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m bench", description="Run Scalewright's speed checks.")
    p.add_argument("--only", metavar="NAME",
                   help="run only bench modules whose name contains NAME (e.g. reliability)")
    args = p.parse_args(argv)
    if str(BENCH_DIR.parent) not in sys.path:
        sys.path.insert(0, str(BENCH_DIR.parent))
    names = discover(args.only)
    if not names:
        print(f"No bench modules found in {BENCH_DIR}" + (f" matching '{args.only}'" if args.only else ""))
        return 0
    rows: list[dict] = []
    started = time.perf_counter()
    for name in names:
        print(f"running {name} ...", file=sys.stderr, flush=True)
        rows.extend(run_module(name))
    print(format_table(rows))
    n_ok = sum(r.get("ok") is True for r in rows)
    print(f"\n{n_ok} of {len(rows)} targets met, {len(names)} module(s), "
          f"{time.perf_counter() - started:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
