"""Which requests the server answers: only its own host names, and state changes only from its own pages.

A web page the user visits can point its own name at 127.0.0.1 (DNS rebinding) and then read the API as
"same-origin"; its requests still carry the page's name in ``Host``, so the server answers only to the
names it is known by: the bound address, ``localhost``, ``127.0.0.1``, ``[::1]``, the names in the
``allowed_hosts`` setting and, when bound to every interface (0.0.0.0 or ::), the addresses of this
machine, including the local address the connection arrived on. A page on another origin can still *send*
a form (a "simple" cross-origin request); state-changing requests carrying a foreign ``Origin`` or
``Sec-Fetch-Site: cross-site`` are therefore refused too. Requests without ``Origin`` (curl, scripts) pass.
"""
from __future__ import annotations

import functools
import ipaddress
import socket
from collections.abc import Iterable, Mapping
from typing import TYPE_CHECKING
from urllib.parse import urlsplit

if TYPE_CHECKING:
    from starlette.requests import Request

    from ..settings import Settings

WILDCARD_HOSTS = {"0.0.0.0", "::", ""}
LOOPBACK_NAMES = {"localhost", "127.0.0.1", "::1"}
STATE_CHANGING = {"POST", "PUT", "PATCH", "DELETE"}
DEFAULT_PORTS = {"http": 80, "https": 443}


def split_host(value: str) -> tuple[str, int | None] | None:
    """``'[::1]:8765'`` -> ``('::1', 8765)``; ``'Example.org.'`` -> ``('example.org', None)``; None if malformed."""
    value = value.strip()
    if not value or any(c in value for c in " /\\@?#"):
        return None
    port_text = None
    if value.startswith("["):
        end = value.find("]")
        if end < 0:
            return None
        name, rest = value[1:end], value[end + 1:]
        if rest:
            if not rest.startswith(":"):
                return None
            port_text = rest[1:]
    elif value.count(":") == 1:
        name, port_text = value.split(":")
    elif ":" in value:  # a bare IPv6 address (not valid in Host, but unambiguous)
        name = value
    else:
        name = value
    port = None
    if port_text is not None:
        if not port_text.isdigit() or not 0 < int(port_text) < 65536:
            return None
        port = int(port_text)
    name = name.lower().rstrip(".")
    return (name, port) if name else None


def _is_ip(name: str) -> bool:
    try:
        ipaddress.ip_address(name)
    except ValueError:
        return False
    return True


def _normal_name(name: str) -> str:
    return name.strip().lower().strip("[]").rstrip(".")


@functools.lru_cache(maxsize=1)
def machine_addresses() -> frozenset[str]:
    """This machine's own addresses as far as its host name resolves (no outside lookup beyond the resolver)."""
    found: set[str] = set()
    try:
        for info in socket.getaddrinfo(socket.gethostname(), None):
            found.add(str(info[4][0]).split("%")[0].lower())
    except OSError:
        pass
    return frozenset(found)


def host_is_allowed(host_header: str | None, *, bound: str, port: int, allowed: Iterable[str] = (),
                    local: tuple[str, int] | None = None) -> bool:
    """Whether a request naming ``host_header`` is for this server.

    ``bound`` and ``port`` are the settings' host and port, ``allowed`` the ``allowed_hosts`` setting and
    ``local`` the (address, port) the connection arrived on (ASGI ``scope["server"]``). A missing Host
    (HTTP/1.0) is accepted: only a browser sends a page's name, and a browser always sends one.
    """
    if host_header is None:
        return True
    parsed = split_host(host_header)
    if parsed is None:
        return False
    name, given_port = parsed
    local_name = _normal_name(str(local[0])) if local and local[0] is not None else None
    local_port = int(local[1]) if local and local[1] is not None else None
    if given_port is not None and given_port not in (port, local_port):
        return False
    bound = _normal_name(bound)
    names = set(LOOPBACK_NAMES) | {entry[0] for h in allowed if (entry := split_host(h))}
    if bound in WILDCARD_HOSTS:
        names |= machine_addresses()
        if local_name and _is_ip(local_name):  # the address this connection arrived on
            names.add(local_name)
    else:
        names.add(bound)
    return name in names


def is_cross_origin(method: str, headers: Mapping[str, str], scheme: str) -> bool:
    """True for a state-changing request sent by a page of another origin (``Origin`` or ``Sec-Fetch-Site``)."""
    if method.upper() not in STATE_CHANGING:
        return False
    if (headers.get("sec-fetch-site") or "").strip().lower() == "cross-site":
        return True
    origin = headers.get("origin")
    if origin is None:
        return False
    origin = origin.strip()
    host = split_host(headers.get("host") or "")
    if origin.lower() == "null" or host is None:
        return True
    try:
        parts = urlsplit(origin)
        origin_port = parts.port
    except ValueError:
        return True
    if parts.scheme not in DEFAULT_PORTS or not parts.hostname or parts.path not in ("", "/"):
        return True
    name, port = host
    own_port = port if port is not None else DEFAULT_PORTS.get(scheme, 80)
    return (parts.scheme != scheme or _normal_name(parts.hostname) != name
            or (origin_port or DEFAULT_PORTS[parts.scheme]) != own_port)


def refusal(request: Request, settings: Settings) -> tuple[int, str, str, dict] | None:
    """``(status, code, message, details)`` when ``request`` must be refused (421 or 403), else None."""
    host = request.headers.get("host")
    if not host_is_allowed(host, bound=settings.host, port=settings.port, allowed=settings.allowed_hosts,
                           local=request.scope.get("server")):
        shown = host[:200]
        return (421, "misdirected_host",
                (f"This Scalewright server does not answer to the host '{shown}'. If you reach it by this "
                 f"name on purpose, add the name to the allowed_hosts setting (--allowed-hosts)."), {"host": shown})
    if is_cross_origin(request.method, request.headers, request.url.scheme):
        origin = (request.headers.get("origin") or "")[:200]
        return (403, "cross_origin",
                "Changes are accepted only from Scalewright's own pages; this request came from another web "
                "site" + (f" ('{origin}')." if origin else "."),
                {"origin": origin or None, "sec_fetch_site": request.headers.get("sec-fetch-site")})
    return None
