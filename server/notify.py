"""The live channel across processes: PostgreSQL LISTEN/NOTIFY feeding each process's in-memory hub.

With the shared store on PostgreSQL, several server processes (``serve --workers N``, or several machines)
answer the same team, so a drop posted to one process must reach the pages whose event stream another
process serves. Each process keeps its own :class:`~server.api.routes_live.LiveHub` (the in-memory fan-out)
and one :class:`PgRelay`:

- a message posted to this process is published to the local hub at once (as without a relay) and sent
  with ``pg_notify`` on the channel ``scalewright_live``, tagged with this process's random origin id;
- one listener thread per process holds a connection that ``LISTEN``\\ s on the channel and hands every
  message of another origin to the hub on the event loop (``loop.call_soon_threadsafe``).

A NOTIFY payload holds at most 8000 bytes, and a relayed state may hold 64 kB, so a message is sent as
ASCII JSON in parts of :data:`PART_CHARS` characters (``MSGID:I:N:TEXT``), all in one transaction:
PostgreSQL delivers them together, in order, when it commits, and the listener joins them by message id.
Nothing is stored: like the in-process channel, a page that was not listening misses the message (the
hub's "last change" is kept per process, from the messages it saw). On SQLite and in folder mode there is
no relay; the in-process hub alone serves the one process. A lost connection is retried every second.
"""
from __future__ import annotations

import asyncio
import json
import logging
import secrets
import threading
from collections.abc import Callable
from typing import Any

log = logging.getLogger("scalewright")

CHANNEL = "scalewright_live"
PART_CHARS = 7000  # characters of one NOTIFY payload part (ASCII), below PostgreSQL's 8000-byte limit
_MAX_PENDING = 256  # unfinished multi-part messages kept by a listener (a sender that died mid-way)

__all__ = ["CHANNEL", "PART_CHARS", "PgRelay", "join_parts", "relay_for", "send_quietly", "split_message"]


def split_message(msg_id: str, body: dict[str, Any]) -> list[str]:
    """``body`` as NOTIFY payloads: ASCII JSON cut into parts ``MSGID:I:N:TEXT`` of at most PART_CHARS chars."""
    text = json.dumps(body, separators=(",", ":"), ensure_ascii=True)
    pieces = [text[i:i + PART_CHARS] for i in range(0, len(text), PART_CHARS)] or [""]
    return [f"{msg_id}:{i}:{len(pieces)}:{piece}" for i, piece in enumerate(pieces)]


def join_parts(pending: dict[str, list], payload: str) -> dict[str, Any] | None:
    """Add one payload part to ``pending``; returns the message once all its parts are in, else None.

    A malformed payload (not sent by Scalewright) is ignored.
    """
    try:
        msg_id, index, total, piece = payload.split(":", 3)
        index, total = int(index), int(total)
    except ValueError:
        return None
    if not (0 <= index < total <= 1000):
        return None
    parts = pending.setdefault(msg_id, [None] * total)
    if len(parts) != total:
        return None
    parts[index] = piece
    if any(p is None for p in parts):
        while len(pending) > _MAX_PENDING:
            pending.pop(next(iter(pending)))
        return None
    del pending[msg_id]
    try:
        body = json.loads("".join(parts))
    except ValueError:
        return None
    return body if isinstance(body, dict) else None


def _libpq_url(store) -> str:
    """The store's URL as libpq reads it (``postgresql://...``, password included)."""
    return store.url.set(drivername="postgresql").render_as_string(hide_password=False)


class PgRelay:
    """Sends this process's live messages to the other processes, and delivers theirs to ``deliver``.

    ``deliver(kind, dataset, message, sender)`` is called on ``loop`` for every message of another process
    (``kind`` is ``"change"`` or ``"progress"``). ``store`` is the :class:`~server.sqlstore.SqlStore` on
    PostgreSQL: its engine sends; the listener thread holds its own connection.
    """

    def __init__(self, store, loop: asyncio.AbstractEventLoop,
                 deliver: Callable[[str, str, dict[str, Any], str | None], None]):
        self.store = store
        self.loop = loop
        self.deliver = deliver
        self.origin = secrets.token_hex(8)
        self.ready = threading.Event()  # set while the listener's LISTEN is active
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._listen, name="live-listen", daemon=True)
        self._thread.start()

    def wait_ready(self, timeout: float = 5.0) -> bool:
        """Wait until the listener is listening (so nothing sent after this returns is missed by it)."""
        return self.ready.wait(timeout)

    def send(self, kind: str, dataset: str, message: dict[str, Any], sender: str | None) -> None:
        """NOTIFY every process (this one skips its own). Blocking: call it off the event loop."""
        import sqlalchemy as sa

        body = {"o": self.origin, "k": kind, "d": dataset, "s": sender, "m": message}
        parts = split_message(secrets.token_hex(6), body)
        with self.store.engine.begin() as conn:
            for part in parts:
                conn.execute(sa.text("SELECT pg_notify(:channel, :payload)"), {"channel": CHANNEL, "payload": part})

    def stop(self) -> None:
        """Stop the listener thread (it ends within a second)."""
        self._stop.set()

    def _listen(self) -> None:
        import psycopg

        pending: dict[str, list] = {}
        while not self._stop.is_set():
            try:
                with psycopg.connect(_libpq_url(self.store), autocommit=True, connect_timeout=10) as conn:
                    conn.execute(f"LISTEN {CHANNEL}")
                    self.ready.set()
                    while not self._stop.is_set():
                        for note in conn.notifies(timeout=1.0):
                            body = join_parts(pending, note.payload)
                            if body is not None and body.get("o") != self.origin:
                                self._hand_over(body)
            except psycopg.Error as exc:
                self.ready.clear()
                pending.clear()
                log.warning("live channel: lost the database connection (%s); retrying", exc)
                self._stop.wait(1.0)
            except RuntimeError:  # the event loop is closed: the server stopped
                return
        self.ready.clear()

    def _hand_over(self, body: dict[str, Any]) -> None:
        kind, dataset, message = body.get("k"), body.get("d"), body.get("m")
        if kind not in ("change", "progress") or not isinstance(dataset, str) or not isinstance(message, dict):
            return
        sender = body.get("s") if isinstance(body.get("s"), str) else None
        self.loop.call_soon_threadsafe(self.deliver, kind, dataset, message, sender)


def relay_for(store, loop: asyncio.AbstractEventLoop, deliver) -> PgRelay | None:
    """A :class:`PgRelay` when ``store`` is the SQL store on PostgreSQL; None otherwise (one process)."""
    if getattr(store, "backend", None) != "postgresql":
        return None
    return PgRelay(store, loop, deliver)


def send_quietly(relay: PgRelay | None, kind: str, dataset: str, message: dict[str, Any],
                 sender: str | None) -> None:
    """``relay.send`` that logs instead of raising (the local pages already have the message)."""
    if relay is None:
        return
    try:
        relay.send(kind, dataset, message, sender)
    except Exception as exc:  # noqa: BLE001  (a database hiccup must not fail the local relay)
        log.warning("live channel: could not notify the other processes (%s)", exc)



async def start_live_relay(app) -> None:
    """At app start on the shared store: the live hub and its relay, so this process keeps the other
    processes' last change per dataset before it serves any live request. Nothing on another store."""
    store = getattr(app.state, "store", None)
    if getattr(store, "backend", None) != "postgresql":
        return
    from .api.routes_live import LiveHub

    hub = app.state.live = LiveHub()
    hub.relay = PgRelay(store, asyncio.get_running_loop(), hub.deliver_remote)
    if not await asyncio.to_thread(hub.relay.wait_ready, 10.0):
        log.warning("live channel: not listening yet; changes of other processes arrive once it is")


def stop_live_relay(app) -> None:
    """Stop the relay's listener thread (app shutdown)."""
    hub = getattr(app.state, "live", None)
    if hub is not None and hub.relay is not None:
        hub.relay.stop()
