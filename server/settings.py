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
    data_dir: Path = _help(  # noqa: RUF009  (a plain Path default, built once like the others)"Folder holding datasets, snapshots and the SQLite database; "
                           "everything that must survive a restart.", Path("data"))
    max_upload_mb: float = _help("Largest upload accepted, in megabytes (larger files get 413).", 100.0)
    token: str | None = _help("Access token every request must carry when the server is shared "
                              "beyond this machine. Generated at start when needed.", None)
    demo: bool = _help("Load the built-in demo data set on first start.", False)

    def __post_init__(self):
        self.data_dir = Path(self.data_dir)
        if self.token is None and not self.is_local:
            self.token = secrets.token_urlsafe(18)

    @property
    def is_local(self) -> bool:
        return self.host in LOCAL_HOSTS

    @property
    def max_upload_bytes(self) -> int:
        return int(self.max_upload_mb * 1024 * 1024)

    @classmethod
    def describe(cls) -> list[tuple[str, object, str]]:
        return [(f.name, f.default, f.metadata.get("help", "")) for f in fields(cls)]
