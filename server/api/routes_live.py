"""Live collaboration: several browsers on one dataset see each other's drops and restores.

``GET /api/datasets/{id}/events`` is a server-sent-events stream (``text/event-stream``);
``POST /api/datasets/{id}/events`` with JSON ``{who, action, state, sender?, browser?}`` relays the message
to every *other* listener of that dataset. Nothing is stored: the hub lives in memory on
``app.state.live`` and forgets everything at restart. With the shared store on PostgreSQL, several
processes serve the team: each hub also sends what is posted to it through PostgreSQL's NOTIFY and
publishes what the other processes send (``server/notify.py``), so a change reaches every page whatever
process serves it (``delivered`` and ``presence`` count this process's pages).

Stream format (one SSE event per message)::

    retry: 2000
    event: hello
    data: {"listener": "<id of this stream>", "dataset": "...", "peers": 2, "last": <last change or null>}

    event: presence
    data: {"listeners": 3}

    id: 7
    event: change
    data: {"seq": 7, "dataset": "...", "sender": "<listener id>", "who": "Ana", "action": "drop",
           "state": {...}, "browser": "<browser id or null>", "at": "2026-12-02T01:40:00Z"}

A page sends its own listener id as ``sender`` so the server skips it (and the page can
ignore any echo), and its browser's stable id as ``browser`` (kept with the last change, so a page
opened later in the same browser does not offer to follow its own earlier change). ``presence`` says
how many pages are open whenever one joins or leaves; ``hello`` carries the last change relayed for
the dataset so a page that joins late can offer to follow the team. Comment lines (``: ping``) keep
idle connections open.

An analysis that takes long says what it computes on the same channel (``run_reported``; issue 14):
``{"action": "analysis_progress", "dataset_id", "stage", "done", "total", "elapsed_s", "key", "request"}``
after 0.4 s of work, at most every 0.25 s, then one with ``"stage": "done", "final": true``; a quick answer sends
nothing. ``key`` is :func:`~server.analysis.progress.key_digest` of the canonical settings, ``request`` the
page's own id of its request (the ``X-Scalewright-Progress`` header), so a page shows only its own analysis.

Streams end when the client disconnects (Starlette cancels the generator), and when the
server is asked to stop: uvicorn waits for open responses before it shuts down, so the hub
wraps uvicorn's SIGINT/SIGTERM handlers and closes every stream first.
"""
from __future__ import annotations

import asyncio
import contextlib
import itertools
import json
import re
import secrets
import signal
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any, TypeVar

from fastapi import APIRouter, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import StreamingResponse
from pydantic import BaseModel, Field

from ..analysis.progress import Reporter, key_digest, reporting
from ..auth import signed_in_name
from .errors import ApiError, not_found
from .openapi import error_responses

router = APIRouter()

PING_SECONDS = 15.0  # keep-alive comment interval
POLL_SECONDS = 0.5  # how often an idle stream checks for shutdown
MAX_STATE_BYTES = 64_000  # a state is a list of kept items and settings; far below this
MAX_LISTENERS_PER_DATASET = 200
_CLOSE = object()  # sentinel put into a queue to end its stream


@dataclass
class Listener:
    id: str
    dataset: str
    queue: asyncio.Queue = field(default_factory=lambda: asyncio.Queue(maxsize=256))


class LiveHub:
    """In-memory fan-out of messages to the listeners of each dataset.

    All methods run on the event loop (the routes are ``async``), so no locks are needed.
    """

    def __init__(self) -> None:
        self._listeners: dict[str, dict[str, Listener]] = {}
        self._last: dict[str, dict[str, Any]] = {}  # dataset -> last change (for pages that join later)
        self._seq = itertools.count(1)
        self.closing = False
        self._signals_wrapped = False
        self.relay = None  # server.notify.PgRelay on the shared PostgreSQL store (set by hub_of)

    def subscribe(self, dataset: str) -> Listener:
        group = self._listeners.setdefault(dataset, {})
        if len(group) >= MAX_LISTENERS_PER_DATASET:
            raise ApiError(429, "too_many_listeners",
                           f"Dataset '{dataset}' already has {len(group)} live pages open.", {"dataset": dataset})
        listener = Listener(id=secrets.token_urlsafe(9), dataset=dataset)
        group[listener.id] = listener
        self._presence(dataset, exclude=listener.id)
        return listener

    def unsubscribe(self, listener: Listener) -> None:
        group = self._listeners.get(listener.dataset, {})
        if group.pop(listener.id, None) is not None:
            self._presence(listener.dataset)
        if not group:
            self._listeners.pop(listener.dataset, None)

    def last(self, dataset: str) -> dict[str, Any] | None:
        """The last change relayed for ``dataset`` (sent to a page when it joins)."""
        return self._last.get(dataset)

    def _presence(self, dataset: str, exclude: str | None = None) -> None:
        """Tell the pages of ``dataset`` how many pages are open now."""
        group = self._listeners.get(dataset, {})
        body = {"event": "presence", "dataset": dataset, "listeners": len(group)}
        for listener in list(group.values()):
            if listener.id != exclude:
                with contextlib.suppress(asyncio.QueueFull):
                    listener.queue.put_nowait(body)

    def count(self, dataset: str) -> int:
        return len(self._listeners.get(dataset, {}))

    def publish(self, dataset: str, message: dict[str, Any], sender: str | None) -> tuple[int, int]:
        """Queue ``message`` for every listener of ``dataset`` except ``sender``.

        Returns ``(seq, delivered)``. A listener whose queue is full (a stalled page) misses the
        message rather than slowing everyone else down.
        """
        seq = next(self._seq)
        body = {"seq": seq, "dataset": dataset, "sender": sender, **message,
                "at": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")}
        self._last[dataset] = body
        delivered = 0
        for listener in list(self._listeners.get(dataset, {}).values()):
            if listener.id == sender:
                continue
            try:
                listener.queue.put_nowait(body)
                delivered += 1
            except asyncio.QueueFull:
                pass
        return seq, delivered

    def deliver_remote(self, kind: str, dataset: str, message: dict[str, Any], sender: str | None) -> None:
        """Publish a message another process sent (``kind`` ``change``, or ``progress`` that keeps the last change)."""
        if kind == "progress":
            _publish_keeping_last(self, dataset, message)
        else:
            self.publish(dataset, message, sender)

    def close_all(self) -> None:
        """End every open stream (server shutdown)."""
        self.closing = True
        if self.relay is not None:
            self.relay.stop()
        for group in list(self._listeners.values()):
            for listener in list(group.values()):
                # a full queue: the stream still sees ``closing`` on its next poll
                with contextlib.suppress(asyncio.QueueFull):
                    listener.queue.put_nowait(_CLOSE)

    def wrap_signal_handlers(self) -> None:
        """Close the streams before uvicorn's own SIGINT/SIGTERM handling (main thread only)."""
        if self._signals_wrapped:
            return
        self._signals_wrapped = True
        loop = asyncio.get_running_loop()
        for sig in (signal.SIGINT, signal.SIGTERM):
            try:
                previous = signal.getsignal(sig)

                def handler(signum, frame, previous=previous):
                    self.closing = True
                    with contextlib.suppress(RuntimeError):  # loop already closed
                        loop.call_soon_threadsafe(self.close_all)
                    if callable(previous):
                        previous(signum, frame)
                    elif previous == signal.SIG_DFL and signum == signal.SIGINT:
                        raise KeyboardInterrupt

                signal.signal(sig, handler)
            except (ValueError, OSError):  # not the main thread (e.g. a test server in a thread)
                pass


def hub_of(request: Request) -> LiveHub:
    app = request.app
    hub = getattr(app.state, "live", None)
    if hub is None:
        from ..notify import relay_for

        hub = app.state.live = LiveHub()
        # called from the async routes, on the event loop the relay hands messages to
        hub.relay = relay_for(getattr(app.state, "store", None), asyncio.get_running_loop(), hub.deliver_remote)
    return hub


def _check_dataset(request: Request, dataset_id: str) -> None:
    getter = getattr(getattr(request.app.state, "store", None), "get_dataset", None)
    if getter is not None and getter(dataset_id) is None:
        raise not_found("dataset", dataset_id)


def _sse(event: str | None, data: dict, ident: int | None = None) -> str:
    lines = []
    if ident is not None:
        lines.append(f"id: {ident}")
    if event:
        lines.append(f"event: {event}")
    lines.append("data: " + json.dumps(data, separators=(",", ":")))
    return "\n".join(lines) + "\n\n"


@router.get("/datasets/{dataset_id}/events", include_in_schema=True, responses=error_responses(429),
            summary="Live stream of other pages' changes to this dataset (server-sent events)")
async def events(dataset_id: str, request: Request) -> StreamingResponse:
    _check_dataset(request, dataset_id)
    hub = hub_of(request)
    hub.wrap_signal_handlers()
    if hub.closing:
        raise ApiError(503, "shutting_down", "The server is shutting down.")
    if hub.relay is not None and not await asyncio.to_thread(hub.relay.wait_ready, 5.0):
        raise ApiError(503, "live_unavailable", "The live channel cannot reach the database server now; the page "
                       "will try again shortly.")
    listener = hub.subscribe(dataset_id)

    async def stream():
        try:
            yield "retry: 2000\n" + _sse("hello", {"listener": listener.id, "dataset": dataset_id,
                                                   "peers": hub.count(dataset_id) - 1, "last": hub.last(dataset_id)})
            idle = 0.0
            while not hub.closing:
                try:
                    item = await asyncio.wait_for(listener.queue.get(), timeout=POLL_SECONDS)
                except TimeoutError:
                    idle += POLL_SECONDS
                    if await request.is_disconnected():
                        break
                    if idle >= PING_SECONDS:
                        idle = 0.0
                        yield ": ping\n\n"
                    continue
                if item is _CLOSE:
                    break
                idle = 0.0
                if item.get("event") == "presence":
                    yield _sse("presence", {"listeners": item["listeners"]})
                else:
                    yield _sse("change", item, item["seq"])
        finally:
            hub.unsubscribe(listener)

    return StreamingResponse(stream(), media_type="text/event-stream",
                             headers={"Cache-Control": "no-store", "X-Accel-Buffering": "no"})


class LiveMessage(BaseModel):
    who: str = Field("", max_length=80, description="The team member's name, shown beside the change.")
    action: str = Field(..., min_length=1, max_length=40,
                        description="What happened: drop, restore, settings, undo, redo, snapshot...")
    state: dict[str, Any] = Field(default_factory=dict,
                                  description="The sender's state after the change (kept items, settings).")
    sender: str | None = Field(None, max_length=64, description="The sender's own listener id (from 'hello').")
    browser: str | None = Field(None, max_length=64, pattern=r"^[A-Za-z0-9_-]+$",
                                description="A stable random id of the sending browser (kept across its tabs), so "
                                            "a page can tell its own browser's last change from a teammate's.")
    detail: str = Field("", max_length=300, description="Optional short human-readable description.")


@router.post("/datasets/{dataset_id}/events", status_code=202, response_model=None, responses=error_responses(413),
             summary="Relay a change to every other page open on this dataset")
async def post_event(dataset_id: str, message: LiveMessage, request: Request) -> dict[str, int]:
    _check_dataset(request, dataset_id)
    size = len(json.dumps(message.state, separators=(",", ":")))
    if size > MAX_STATE_BYTES:
        raise ApiError(413, "too_large", f"The shared state is {size} bytes; at most {MAX_STATE_BYTES} are relayed.",
                       {"bytes": size, "limit": MAX_STATE_BYTES})
    hub = hub_of(request)
    body = {"who": signed_in_name(request, message.who), "action": message.action, "state": message.state,
            "detail": message.detail, "browser": message.browser}
    seq, delivered = hub.publish(dataset_id, body, message.sender)
    if hub.relay is not None:  # the pages served by the other processes
        from ..notify import send_quietly

        await asyncio.to_thread(send_quietly, hub.relay, "change", dataset_id, body, message.sender)
    return {"seq": seq, "delivered": delivered, "listeners": hub.count(dataset_id)}


def publish_threadsafe(hub: LiveHub, loop: asyncio.AbstractEventLoop, dataset: str, message: dict[str, Any]) -> None:
    """Publish ``message`` on ``dataset``'s channel from another thread (a resampling run's progress).

    The hub lives on the event loop, so the call is handed to it; the dataset's last change (replayed to
    pages that join later) is kept as it was, since a progress message is not a change of the shared state.
    """
    with contextlib.suppress(RuntimeError):  # the loop is closed: the server is stopping
        loop.call_soon_threadsafe(_publish_keeping_last, hub, dataset, message)
    if hub.relay is not None:  # this thread is not the event loop: sending here blocks only the run
        from ..notify import send_quietly

        send_quietly(hub.relay, "progress", dataset, message, None)


def _publish_keeping_last(hub: LiveHub, dataset: str, message: dict[str, Any]) -> None:
    last = hub._last.get(dataset)
    hub.publish(dataset, message, None)
    if last is None:
        hub._last.pop(dataset, None)
    else:
        hub._last[dataset] = last


T = TypeVar("T")
PROGRESS_HEADER = "x-scalewright-progress"  # the page's id of its request, echoed as "request"
_REQUEST_ID = re.compile(r"[A-Za-z0-9_-]{1,64}")


async def run_reported(request: Request, dataset_id: str, work: Callable[[], T]) -> T:
    """``work()`` in the thread pool, its progress stages published on ``dataset_id``'s live channel.

    A :class:`~server.analysis.progress.Reporter` is installed for this request only (a context variable the
    thread pool copies into its worker); a timer on the event loop sends a stage that lasts (a wait for a slot,
    a long parallel analysis) once the work is past the reporter's delay, and repeats it now and then for a page
    that connects late (a page sends its first analysis before it opens the live channel, so the reporter is
    installed whether or not anyone listens yet; a quick answer costs it a timer set and cancelled).
    """
    hub = hub_of(request)
    loop = asyncio.get_running_loop()
    loop_thread = threading.get_ident()
    given = request.headers.get(PROGRESS_HEADER) or ""
    base = {"action": "analysis_progress", "dataset_id": dataset_id,
            "request": given if _REQUEST_ID.fullmatch(given) else None}

    def send(message: dict[str, Any]) -> None:
        body = {**base, **message}
        if isinstance(body.get("key"), str):
            body["key"] = key_digest(body["key"])
        if threading.get_ident() != loop_thread:
            publish_threadsafe(hub, loop, dataset_id, body)
            return
        _publish_keeping_last(hub, dataset_id, body)
        if hub.relay is not None:  # sending may block: not on the event loop
            from ..notify import send_quietly

            loop.run_in_executor(None, send_quietly, hub.relay, "progress", dataset_id, body, None)

    reporter = Reporter(send)

    def tick() -> None:
        nonlocal timer
        reporter.flush()
        timer = loop.call_later(reporter.interval, tick)

    timer = loop.call_later(reporter.delay, tick)
    try:
        with reporting(reporter):
            return await run_in_threadpool(work)
    finally:
        timer.cancel()
        reporter.finish()
