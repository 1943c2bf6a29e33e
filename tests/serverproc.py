"""A real Scalewright server in a subprocess, for the tests that need one (browser, memory, network).

``running_server(data_dir, ...)`` starts ``python -m server serve`` on a free port, waits until
``/api/health`` answers, yields ``(proc, base_url)`` and stops the process however the test ends. A server
that does not come up fails the test with the end of its log.
"""
from __future__ import annotations

import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx
import pytest

ROOT = Path(__file__).resolve().parents[1]


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def peak_rss_bytes(pid: int) -> int:
    """The process's peak resident memory (VmHWM in /proc/PID/status), in bytes."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024
    raise AssertionError("no VmHWM in /proc/PID/status")


@contextmanager
def running_server(data_dir: Path, *args: str, port: int | None = None, address: str = "127.0.0.1",
                   token: str | None = None, log: Path | None = None,
                   timeout: float = 90.0) -> Iterator[tuple[subprocess.Popen, str]]:
    """Start ``python -m server serve --port P --data-dir DATA_DIR [ARGS...]``; yield (process, base URL).

    ``address`` is where the test reaches it (the LAN address of a server bound to 0.0.0.0, say); with a
    ``token`` the health check carries it. The log goes to ``log`` (default: beside the data folder).
    """
    port = port or free_port()
    log = log or Path(data_dir).parent / f"server-{port}.log"
    cmd = [sys.executable, "-m", "server", "serve", "--port", str(port), "--data-dir", str(data_dir)]
    if token:
        cmd += ["--token", token]
    base = f"http://{address}:{port}"
    health = f"{base}/api/health" + (f"?token={token}" if token else "")
    with open(log, "wb") as out:
        proc = subprocess.Popen([*cmd, *args], cwd=ROOT, stdout=out, stderr=subprocess.STDOUT)
    try:
        deadline = time.time() + timeout
        while True:
            try:
                if httpx.get(health, timeout=1, trust_env=False).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if proc.poll() is not None or time.time() > deadline:
                pytest.fail("The server did not start: " + log.read_text(errors="replace")[-2000:])
            time.sleep(0.1)
        yield proc, base
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def lan_address() -> str | None:
    """This machine's address on its default route (a UDP connect sends nothing), if it has one."""
    try:
        with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
            s.connect(("192.0.2.1", 9))  # TEST-NET-1: only the routing decision, no packet leaves
            address = s.getsockname()[0]
    except OSError:
        return None
    return None if address.startswith("127.") or address == "0.0.0.0" else address
