"""Every number of four analyses is what the code before the speed work of issue 14 gave.

The reference file tests/reference/numbers/issue14_before.json.gz was written by
``python -m tests.analysis.numbers_cases`` at the commit named in its ``written_by`` field (before the Newton
solvers, the reference warm starts and the cheaper cache accounting): the demo (whole pool and a drop of two
items) and a simulated 250-item pool of 1,500 respondents (whole pool and a drop of one item). Solvers now stop
closer to the optimum than L-BFGS-B did, so numbers may move in their seventh digit; every label, count and
item order must be the same, and every number the same to 1e-6 (the dashboard prints three decimals).
This is a regression check of our own earlier output; the external references of each statistic are in the
tests beside it.
"""
from __future__ import annotations

import gzip
import json
import math
from pathlib import Path

import pytest

from tests.analysis.numbers_cases import cases

REFERENCE = Path(__file__).resolve().parents[1] / "reference" / "numbers" / "issue14_before.json.gz"
TOL = 1e-6


@pytest.fixture(scope="module")
def before() -> dict:
    return json.loads(gzip.decompress(REFERENCE.read_bytes()))


@pytest.fixture(scope="module")
def now() -> dict:
    return cases()


def _differences(old: dict, new: dict) -> list[str]:
    bad = []
    for path, was in old.items():
        if path not in new:
            bad.append(f"{path}: gone (was {was!r})")
            continue
        is_ = new[path]
        if isinstance(was, float) or isinstance(is_, float):
            numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (was, is_))
            if not numbers or not math.isclose(float(was), float(is_), rel_tol=TOL, abs_tol=TOL):
                bad.append(f"{path}: {was!r} -> {is_!r}")
        elif was != is_:
            bad.append(f"{path}: {was!r} -> {is_!r}")
    return bad


@pytest.mark.slow
@pytest.mark.parametrize("case", ["demo", "demo_drop2", "pool250", "pool250_drop1"])
def test_numbers_as_before_the_speed_work(before, now, case):
    old, new = before["cases"][case], now[case]
    assert len(old) > 1000  # the whole answer, not a corner of it
    bad = _differences(old, new)
    assert not bad, f"{len(bad)} of {len(old)} values changed, e.g.:\n" + "\n".join(bad[:25])


def test_the_comparison_catches_a_changed_number_and_a_changed_label():
    old = {"/a": 0.8491234, "/b": "welcome", "/c": 3}
    assert _differences(old, {"/a": 0.8491236, "/b": "welcome", "/c": 3}) == []
    assert len(_differences(old, {"/a": 0.8492, "/b": "welcome", "/c": 3})) == 1
    assert len(_differences(old, {"/a": 0.8491234, "/b": "ownership", "/c": 3})) == 1
    assert len(_differences(old, {"/b": "welcome", "/c": 3})) == 1
