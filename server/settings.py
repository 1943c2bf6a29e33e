"""One Settings object for the whole server; each setting has a name, a default and a help text."""
from __future__ import annotations

import secrets
from dataclasses import dataclass, field, fields
from pathlib import Path

LOCAL_HOSTS = {"127.0.0.1", "localhost", "::1"}


def _help(text: str, default):
    return field(default=default, metadata={"help": text})


@dataclass
class Settings:
    host: str = _help("Address to bind. 127.0.0.1 keeps the dashboard on this machine; "
                      "0.0.0.0 shares it on the local network and then requires the access token.",
                      "127.0.0.1")
    port: int = _help("TCP port to listen on.", 8765)
    data_dir: Path = _help(  # noqa: RUF009  (a plain Path default, built once like the others)
        "Folder holding the SQLite database (datasets with their uploads, snapshots, the audit log), uploads in "
        "flight and resampling workers' files; everything that must survive a restart.",
        Path("data"))
    database_url: str | None = _help(
        "Database holding datasets, snapshots and the audit log, as a URL: postgresql://USER@HOST:PORT/DB for a "
        "shared PostgreSQL server, or sqlite:///PATH for one SQLite file (uploads kept inside it). Empty: the "
        "SQLite file scalewright.db in the data folder (uploads kept inside it too).", None)
    max_upload_mb: float = _help("Largest upload accepted, in megabytes (larger files get 413).", 100.0)
    token: str | None = _help("Access token every request must carry when the server is shared "
                              "beyond this machine. Generated at start when needed.", None)
    demo: bool = _help("Load the built-in demo data set on first start.", False)
    allowed_hosts: tuple[str, ...] = _help(
        "Extra host names the server answers to (a LAN name or address), besides the bound address, "
        "localhost, 127.0.0.1 and [::1]. Requests naming any other Host are refused (421), which stops a "
        "web page from reaching the dashboard by rebinding its own name to this machine.", ())
    max_items: int = _help("Most item columns a response file may have (more get 422 naming the count).", 1000)
    max_xlsx_cells: int = _help("Most cells an XLSX sheet may span: its declared dimension and the extent "
                                "of the cells it really holds, both read by streaming before the grid is "
                                "loaded; larger sheets get 413 naming the sheet and dimension.",
                                5_000_000)
    max_unpacked_mb: float = _help("Most megabytes an XLSX workbook may unpack to (a guard against zip "
                                   "bombs); larger workbooks get 413.", 1024.0)
    cache_mb: float = _help("Memory, in megabytes, for parsed datasets kept between requests; the least "
                            "recently used are dropped first (and re-read from disk when needed).", 2048.0)
    run_workers: int | None = _help("Worker processes of each resampling run; empty means one per core. They run "
                                    "at a lower priority than the server, so it keeps answering drops during a "
                                    "run.", None)
    max_import_mb: float = _help("Largest workspace backup the dashboard imports, in megabytes (the zip and "
                                 "what it unpacks to; larger get 413); the command-line restore has no such limit.",
                                 2048.0)

    def __post_init__(self):
        self.data_dir = Path(self.data_dir)
        if isinstance(self.allowed_hosts, str):
            self.allowed_hosts = tuple(h.strip() for h in self.allowed_hosts.split(",") if h.strip())
        self.allowed_hosts = tuple(self.allowed_hosts)
        if self.token is None and not self.is_local:
            self.token = secrets.token_urlsafe(18)

    @property
    def is_local(self) -> bool:
        return self.host in LOCAL_HOSTS

    @property
    def store_url(self) -> str:
        """The database the server keeps its data in: ``database_url``, or the data folder's SQLite file."""
        if self.database_url:
            return self.database_url
        from .folder_store import folder_url

        return folder_url(self.data_dir)

    @property
    def max_upload_bytes(self) -> int:
        return int(self.max_upload_mb * 1024 * 1024)

    @property
    def cache_bytes(self) -> int:
        return int(self.cache_mb * 1024 * 1024)

    @property
    def max_unpacked_bytes(self) -> int:
        return int(self.max_unpacked_mb * 1024 * 1024)

    @property
    def max_import_bytes(self) -> int:
        return int(self.max_import_mb * 1024 * 1024)

    @classmethod
    def describe(cls) -> list[tuple[str, object, str]]:
        return [(f.name, f.default, f.metadata.get("help", "")) for f in fields(cls)]
