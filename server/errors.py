"""Domain errors of the layers below the API (the engine, services); ``server.api.errors`` maps them to HTTP."""
from __future__ import annotations


class NotFound(LookupError):
    """Something asked for by id does not exist: ``kind`` ("dataset", "snapshot"...) and ``ident``.

    The API answers it with 404 ``{"error": {"code": "not_found", "message", "details": {kind: ident}}}``.
    """

    def __init__(self, kind: str, ident: str):
        self.kind, self.ident = kind, ident
        self.message = f"No {kind} with id '{ident}'."
        super().__init__(self.message)
