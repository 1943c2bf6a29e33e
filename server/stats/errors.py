"""The one exception the statistics layer raises for bad input."""
from __future__ import annotations


class InputError(ValueError):
    """Input that cannot be analysed, with a message a user can act on.

    ``code`` is a short machine-readable word (``bad_column``, ``too_few_items``...),
    ``details`` names the file, column, row or value involved.  The API turns it into
    ``{"error": {"code", "message", "details"}}`` with status ``status`` (default 422).
    """

    def __init__(self, message: str, *, code: str = "bad_input", details: dict | None = None,
                 status: int = 422):
        super().__init__(message)
        self.message = message
        self.code = code
        self.details = details or {}
        self.status = status
