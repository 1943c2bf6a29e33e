"""Test-retest and parallel forms between two stored datasets: match respondents by ID, score, compare.

The service behind ``POST /api/retest`` (and the retest a snapshot may keep). It finds the two waves
through the engine, checks that the items and respondent IDs line up, scores both waves with the same
reverse keying and hands the matched matrices to :func:`server.stats.stability.retest`. Bad requests
raise :class:`~server.stats.errors.InputError` naming the dataset, item or IDs involved.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields, replace

import numpy as np

from .engine import Engine
from .errors import NotFound
from .stats.errors import InputError
from .stats.notes import Note, note
from .stats.stability import RetestResult, retest
from .store import StoreBackend


@dataclass(frozen=True)
class RetestQuery:
    """What to compare: the second wave, and the first wave directly or through a snapshot of it."""

    second: str
    first: str | None = None
    items: Sequence[str] | None = None
    items_second: Sequence[str] | None = None
    snapshot: str | None = None
    score: str = "sum"
    reverse: Sequence[str] | None = None
    by_construct: bool = False


@dataclass(frozen=True)
class Wave:
    """One dataset taking part in the comparison."""

    id: str
    name: str
    id_column: str | None
    n_rows: int


@dataclass(frozen=True)
class Unmatched:
    """Respondent IDs present in one wave only."""

    count: int
    ids: tuple[str, ...]


@dataclass(frozen=True)
class RetestAnswer(RetestResult):
    """The stability statistics plus how the two waves were matched and scored."""

    first: Wave
    second: Wave
    snapshot: str | None
    parallel_forms: bool
    reverse: tuple[str, ...]
    reverse_second: tuple[str, ...]
    n_matched: int
    only_first: Unmatched
    only_second: Unmatched
    by_construct: dict[str, RetestResult] | None = None


def _wave(dataset_id: str, ds) -> Wave:
    return Wave(id=dataset_id, name=ds.name, id_column=ds.id_column, n_rows=int(ds.n_rows))


def _ids_of(dataset_id: str, ds, which: str) -> list[str]:
    """The wave's respondent IDs as text; refuses a wave without IDs or with repeated ones."""
    if ds.ids is None:
        raise InputError(f"The {which} dataset '{ds.name}' has no respondent ID column, so its respondents cannot "
                         f"be matched with the other wave. Upload it again naming its ID column.",
                         code="no_id_column", details={"dataset": dataset_id, "which": which})
    ids = [str(i).strip() for i in ds.ids]
    seen: set[str] = set()
    dups: list[str] = []
    for i in ids:
        if i in seen and i not in dups:
            dups.append(i)
        seen.add(i)
    if dups:
        raise InputError(f"The {which} dataset '{ds.name}' has repeated respondent IDs ({', '.join(dups[:5])}"
                         f"{', ...' if len(dups) > 5 else ''}), so respondents cannot be matched one to one.",
                         code="duplicate_ids",
                         details={"dataset": dataset_id, "which": which, "ids": dups[:50], "count": len(dups)})
    return ids


def _check_items(wanted: Sequence[str], ds, dataset_id: str, which: str, code: str) -> None:
    names = {it.name for it in ds.items}
    missing = [i for i in wanted if i not in names]
    if missing:
        raise InputError(f"The {which} dataset '{ds.name}' has no item(s) {', '.join(repr(m) for m in missing[:10])}"
                         f"{', ...' if len(missing) > 10 else ''}; both waves must hold the items being compared.",
                         code=code, details={"dataset": dataset_id, "which": which, "items": list(missing)})


def _snapshot_of(store: StoreBackend, query: RetestQuery) -> dict | None:
    if query.snapshot is None:
        return None
    snap = store.get_snapshot(query.snapshot)
    if snap is None:
        raise NotFound("snapshot", query.snapshot)
    return snap


def _range_warnings(ds1, ds2, items: Sequence[str]) -> list[Note]:
    """Items whose answer range differs between the waves (reverse scoring and totals may not compare)."""
    meta2 = {it.name: it for it in ds2.items}
    out = []
    for it in ds1.items:
        other = meta2.get(it.name)
        if it.name in items and other is not None and (it.min, it.max) != (other.min, other.max):
            out.append(note("item_range_differs", f"Item '{it.name}' has range {it.min:g}-{it.max:g} in the first "
                            f"wave but {other.min:g}-{other.max:g} in the second; reverse scoring and totals may not "
                            f"be comparable.", [it.name]))
    return out


def _by_construct(ds1, ds2, A: np.ndarray, B: np.ndarray, items: list[str], items2: list[str],
                  matched: list[str], score: str, parallel: bool) -> tuple[dict[str, RetestResult], list[Note]]:
    """The retest block of each codebook construct of the first wave among the chosen items.

    A block is exactly the whole-scale statistics of a retest restricted to that construct's items (the
    second wave's items paired by position for parallel forms). Items without a construct are in no block
    (note ``items_without_construct``); a construct with one chosen item gets a full block whose total is
    that item, with the note ``construct_one_item``.
    """
    if len(items2) != len(items):
        raise InputError(f"Stability per construct pairs the forms' items by position, but the first form has "
                         f"{len(items)} item(s) and the second {len(items2)}; give forms of equal length or leave "
                         f"out `by_construct`.", code="by_construct_unequal_forms",
                         details={"n_first": len(items), "n_second": len(items2)})
    construct_of = {it.name: it.construct for it in ds1.items}
    groups: dict[str, list[int]] = {}
    for j, name in enumerate(items):
        if construct_of.get(name):
            groups.setdefault(str(construct_of[name]), []).append(j)
    notes: list[Note] = []
    loose = [name for name in items if not construct_of.get(name)]
    if not groups:
        notes.append(note("no_constructs", f"None of the chosen items has a construct in the codebook of the first "
                          f"wave '{ds1.name}', so there is no per-construct block."))
    elif loose:
        notes.append(note("items_without_construct", f"{len(loose)} chosen item(s) have no construct in the first "
                          f"wave's codebook and are in no per-construct block: "
                          f"{', '.join(loose[:10])}{', ...' if len(loose) > 10 else ''}.", loose))
    blocks: dict[str, RetestResult] = {}
    for construct, cols in groups.items():
        names, names2 = [items[j] for j in cols], [items2[j] for j in cols]
        res = retest(A[:, cols], B[:, cols], score=score, items=names, items_second=names2, ids=matched)
        extra = [] if parallel else _range_warnings(ds1, ds2, names)
        if len(cols) == 1:
            extra.append(note("construct_one_item", f"Construct '{construct}' has one chosen item ({names[0]}); "
                              f"its total is that item's score.", names))
        blocks[construct] = replace(res, warnings=tuple(extra) + tuple(res.warnings))
    return blocks, notes


def compute_retest(engine: Engine, store: StoreBackend, query: RetestQuery) -> RetestAnswer:
    """Match the two waves by respondent ID, score them alike and compare them (the answer of POST /api/retest).

    Raises
    ------
    NotFound
        An unknown snapshot or dataset.
    InputError
        Naming the problem: a snapshot of another dataset, the same dataset twice, unknown or mismatched
        items, missing or repeated IDs, or no ID in common.
    """
    first, items, reverse = query.first, query.items, query.reverse
    snap = _snapshot_of(store, query)
    if snap is not None:
        snap_ds = snap.get("dataset_id")
        if first is None:
            first = snap_ds
        elif snap_ds is not None and snap_ds != first:
            raise InputError(f"Snapshot '{query.snapshot}' belongs to dataset '{snap_ds}', not to the first wave "
                             f"'{first}'.", code="snapshot_mismatch",
                             details={"snapshot": query.snapshot, "dataset": snap_ds, "first": first})
        if items is None:
            items = list(snap.get("items") or [])
        if reverse is None:
            reverse = (snap.get("settings") or {}).get("reverse")
    if first is None:
        raise InputError("Name the first wave (`first`) or a snapshot of it (`snapshot`).", code="bad_request",
                         details={"field": "first"})
    second = query.second
    if first == second:
        raise InputError("The first and second waves are the same dataset; pick the other wave.",
                         code="same_dataset", details={"first": first, "second": second})
    ds1, ds2 = engine.dataset(first), engine.dataset(second)
    names1 = [it.name for it in ds1.items]
    names2 = [it.name for it in ds2.items]
    items = list(names1 if items is None else items)
    if not items:
        raise InputError("No items to score.", code="no_items", details={"field": "items"})
    if len(set(items)) != len(items):
        raise InputError("An item is named twice in `items`.", code="duplicate_items", details={"items": items})
    _check_items(items, ds1, first, "first", "unknown_item")
    parallel = query.items_second is not None
    items2 = list(query.items_second) if query.items_second is not None else list(items)
    if parallel:
        if not items2:
            raise InputError("`items_second` is empty.", code="no_items", details={"field": "items_second"})
        _check_items(items2, ds2, second, "second", "unknown_item")
    else:
        _check_items(items2, ds2, second, "second", "mismatched_items")
    ids1 = _ids_of(first, ds1, "first")
    ids2 = _ids_of(second, ds2, "second")

    # scoring: the same reverse set in both waves (taken from the first) unless these are parallel forms
    reverse = [it.name for it in ds1.items if it.reverse] if reverse is None else list(reverse)
    X1 = engine.scored(first, reverse)
    if parallel:
        reverse2 = [it.name for it in ds2.items if it.reverse]
        X2 = engine.scored(second, None)
    else:
        reverse2 = [r for r in reverse if r in names2]
        X2 = engine.scored(second, reverse2)
    warnings: list[Note] = [] if parallel else _range_warnings(ds1, ds2, items)

    pos2 = {i: r for r, i in enumerate(ids2)}
    set1 = set(ids1)
    matched = [i for i in ids1 if i in pos2]
    only_first = [i for i in ids1 if i not in pos2]
    only_second = [i for i in ids2 if i not in set1]
    if not matched:
        raise InputError(f"No respondent ID appears in both waves ('{ds1.name}' has {len(ids1)} IDs, e.g. "
                         f"{', '.join(ids1[:3])}; '{ds2.name}' has {len(ids2)}, e.g. {', '.join(ids2[:3])}).",
                         code="no_overlap",
                         details={"n_first": len(ids1), "n_second": len(ids2), "first_examples": ids1[:5],
                                  "second_examples": ids2[:5]})
    pos1 = {i: r for r, i in enumerate(ids1)}
    A = X1[np.ix_([pos1[i] for i in matched], [names1.index(i) for i in items])]
    B = X2[np.ix_([pos2[i] for i in matched], [names2.index(i) for i in items2])]
    result = retest(A, B, score=query.score, items=items, items_second=items2, ids=matched)
    if only_first or only_second:
        warnings.insert(0, note("retest_unmatched", f"{len(matched)} respondent(s) are in both waves; "
                                f"{len(only_first)} only in the first and {len(only_second)} only in the second are "
                                f"left out."))
    blocks = None
    if query.by_construct:
        blocks, construct_notes = _by_construct(ds1, ds2, A, B, items, items2, matched, query.score,
                                                 parallel)
        warnings.extend(construct_notes)
    stats = {f.name: getattr(result, f.name) for f in fields(RetestResult)}
    stats["warnings"] = tuple(warnings) + tuple(result.warnings)
    return RetestAnswer(**stats, first=_wave(first, ds1), second=_wave(second, ds2), snapshot=query.snapshot,
                        parallel_forms=parallel, reverse=tuple(reverse), reverse_second=tuple(reverse2),
                        n_matched=len(matched), only_first=Unmatched(len(only_first), tuple(only_first)),
                        only_second=Unmatched(len(only_second), tuple(only_second)), by_construct=blocks)
