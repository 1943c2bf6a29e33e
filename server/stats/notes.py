"""Soft problems as objects: a stable ``code``, the sentence a person reads, and the items concerned.

Code that filters or de-duplicates warnings uses ``code`` and ``items``, never the wording of
``message``: a sentence can be reworded without changing what the program does.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

__all__ = ["Note", "note", "unique", "warning_text"]


@dataclass(frozen=True)
class Note:
    """One warning: ``{"code", "message", "items"}`` in JSON.

    ``code`` is a stable snake_case word (``heywood``, ``polychoric_sparse_category``...); ``items``
    names the items the warning is about (empty when it concerns the whole matrix or model).
    """

    code: str
    message: str
    items: tuple[str, ...] = ()

    def __str__(self) -> str:
        return self.message

    def to_dict(self) -> dict:
        """``{"code", "message", "items"}``."""
        return {"code": self.code, "message": self.message, "items": list(self.items)}


def note(code: str, message: str, items: Iterable[object] = ()) -> Note:
    """A :class:`Note` with its items as a tuple of strings."""
    return Note(code, message, tuple(str(i) for i in items))


def unique(notes: Iterable[Note]) -> list[Note]:
    """The notes in order, each (code, message, items) once."""
    return list(dict.fromkeys(notes))


def warning_text(w: object) -> str:
    """The sentence of a warning, whether a :class:`Note`, its JSON (a dict) or an old plain string."""
    if isinstance(w, Note):
        return w.message
    if isinstance(w, dict):
        return str(w.get("message", ""))
    return str(w)


def messages(notes: Sequence[Note]) -> list[str]:
    """The sentences of ``notes``, in order."""
    return [n.message for n in notes]
