"""What a long analysis is computing now: named stages, reported to whoever listens (issue 14).

The analysis code says where it is with :func:`stage` (``stage("parallel analysis: 500 random draws")``,
``stage("reading the responses", done=3, total=10)``). Nobody listens unless a caller installs a
:class:`Reporter` with :func:`reporting`; then :func:`stage` is one lookup of a context variable and a
return (a few dozen nanoseconds), so the calls can stay in the drop path.

A :class:`Reporter` keeps the latest stage and hands a message to its ``send`` only when the work has
already taken ``delay`` seconds, at most once per ``interval``, and, at :meth:`Reporter.finish`, a final
``"done"`` if it sent anything: a quick answer sends nothing. :meth:`Reporter.flush` (called by a timer
of the caller's) sends a stage left waiting by the throttle or one that lasts (a wait for another request,
no further stage calls), and repeats an unchanged stage every ``repeat`` seconds.

The current reporter lives in a :class:`contextvars.ContextVar`, so it belongs to one request: a thread
pool that copies the context (``run_in_threadpool``) carries it into the worker; another request's
context, and threads started without it (the engine's background work), see none. Nothing here imports
the web framework.
"""
from __future__ import annotations

import hashlib
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Any

__all__ = ["DELAY", "INTERVAL", "REPEAT", "Reporter", "current", "key_digest", "reporting", "stage", "tag"]

DELAY = 0.4  # seconds of work before the first message: a drop that answers sooner sends nothing
INTERVAL = 0.25  # at most one message per this many seconds
REPEAT = 1.0  # a stage that lasts is sent again after this many seconds (for a page that started listening late)

_current: ContextVar[Reporter | None] = ContextVar("scalewright_progress", default=None)


def stage(name: str, done: int | None = None, total: int | None = None) -> None:
    """Say which stage the current work is in (``done`` of ``total`` steps, if counted); a no-op if nobody listens."""
    reporter = _current.get()
    if reporter is not None:
        reporter.stage(name, done, total)


def tag(**fields: Any) -> None:
    """Add fields to every message of the current reporter (e.g. ``key``: which analysis this is)."""
    reporter = _current.get()
    if reporter is not None:
        reporter.fields.update(fields)


def key_digest(key: str) -> str:
    """A short stable name of a canonical settings key (``AnalysisSettings.key()``): its SHA-256, 16 hex digits."""
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def current() -> Reporter | None:
    """The reporter of this context, or None."""
    return _current.get()


@contextmanager
def reporting(reporter: Reporter | None) -> Iterator[Reporter | None]:
    """Install ``reporter`` for the code inside the block (None: nobody listens inside it); the previous one after."""
    token = _current.set(reporter)
    try:
        yield reporter
    finally:
        _current.reset(token)


class Reporter:
    """The latest stage of one piece of work, and when to tell ``send`` about it.

    ``send(message)`` receives ``{"stage", "done", "total", "elapsed_s", **fields}``; the last one, from
    :meth:`finish`, has ``"stage": "done"`` and ``"final": True``. It is called outside the reporter's lock,
    from the thread that calls :meth:`stage`, :meth:`flush` or :meth:`finish`.
    """

    def __init__(self, send: Callable[[dict[str, Any]], None], *, delay: float | None = None,
                 interval: float | None = None, repeat: float | None = None,
                 clock: Callable[[], float] = time.monotonic, **fields: Any):
        self._send = send
        self.delay = DELAY if delay is None else delay  # read when made: a test may change the module's values
        self.interval = INTERVAL if interval is None else interval
        self.repeat = REPEAT if repeat is None else repeat
        self._clock = clock
        self.started = clock()
        self.fields: dict[str, Any] = dict(fields)
        self._lock = threading.Lock()
        self._latest: tuple[str, int | None, int | None] = ("starting", None, None)
        self._unsent = True  # the latest stage has not been sent yet
        self._last_sent: float | None = None
        self.sent = 0
        self.finished = False

    def stage(self, name: str, done: int | None = None, total: int | None = None) -> None:
        """Record the stage; send it now if the work is old enough and the last message was long enough ago."""
        with self._lock:
            self._latest = (name, done, total)
            self._unsent = True
            message = self._due(self._clock())
        if message is not None:
            self._send(message)

    def flush(self) -> bool:
        """Send the latest stage if it is unsent and due, or unchanged for ``repeat`` seconds (a timer calls this
        during a long stage); whether it sent."""
        with self._lock:
            now = self._clock()
            if self._last_sent is not None and now - self._last_sent >= self.repeat:
                self._unsent = True  # the same stage again, for a page that started listening since
            message = self._due(now)
        if message is not None:
            self._send(message)
        return message is not None

    def finish(self) -> bool:
        """The work is over: send ``"done"`` if any stage was sent (a quick answer stays silent); whether it sent."""
        with self._lock:
            if self.finished:
                return False
            self.finished = True
            message = self._message("done", None, None, self._clock()) if self.sent else None
        if message is not None:
            message["final"] = True
            self._send(message)
        return message is not None

    def _due(self, now: float) -> dict[str, Any] | None:
        if self.finished or not self._unsent or now - self.started < self.delay:
            return None
        if self._last_sent is not None and now - self._last_sent < self.interval:
            return None
        self._unsent = False
        self._last_sent = now
        self.sent += 1
        return self._message(*self._latest, now)

    def _message(self, name: str, done: int | None, total: int | None, now: float) -> dict[str, Any]:
        return {"stage": name, "done": done, "total": total, "elapsed_s": round(now - self.started, 2), **self.fields}
