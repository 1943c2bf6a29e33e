"""Scalewright's speed checks: ``python -m bench`` (``make bench``) runs every ``bench/bench_*.py``.

Each module exposes ``run() -> list[dict]`` with rows
``{"target", "measured", "baseline", "ratio", "goal", "ok"}``; the runner prints them as one table.
"""
