"""The one serializer of the API edge: typed results (dataclasses, numpy values) to JSON bytes.

orjson does the work (``OPT_SERIALIZE_NUMPY`` for arrays and numpy scalars, ``OPT_NON_STR_KEYS`` for
dictionaries keyed by numbers). NaN and infinities become ``null``: orjson writes every non-finite float,
Python's or numpy's, as ``null`` (its documented behaviour, fixed by ``tests/api/test_serialize.py``).
A dataclass is written through its ``to_dict()`` when it has one (results whose JSON shape differs from
their fields), otherwise field by field, under ``field(metadata={"json": "name"})`` when given.
"""
from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

import numpy as np
import orjson
from fastapi.responses import JSONResponse

OPTIONS = orjson.OPT_SERIALIZE_NUMPY | orjson.OPT_NON_STR_KEYS | orjson.OPT_PASSTHROUGH_DATACLASS


def _default(obj: Any) -> Any:
    if isinstance(obj, np.ndarray):  # only arrays orjson cannot write directly (not C-contiguous, object dtype)
        return obj.tolist()
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        to_dict = getattr(obj, "to_dict", None)
        if callable(to_dict):
            return to_dict()
        return {f.metadata.get("json", f.name): getattr(obj, f.name) for f in dataclasses.fields(obj)}
    if isinstance(obj, Mapping):
        return dict(obj)
    if isinstance(obj, (set, frozenset)):
        return sorted(obj)
    if isinstance(obj, np.generic):
        return obj.item()
    raise TypeError(f"{type(obj).__name__} cannot be written as JSON")


def dumps(obj: Any) -> bytes:
    """JSON bytes of ``obj`` (see the module note for how values are written)."""
    return orjson.dumps(obj, default=_default, option=OPTIONS)


def to_jsonable(obj: Any) -> Any:
    """Plain JSON data (dicts, lists, str, int, float, bool, None) of ``obj``, exactly as the API sends it."""
    return orjson.loads(dumps(obj))


class AnswerResponse(JSONResponse):
    """A JSON response written by :func:`dumps` (typed answers, numpy values, NaN as null)."""

    def render(self, content: Any) -> bytes:
        return dumps(content)
