"""Command line: ``scalewright serve [--host 127.0.0.1] [--port 8765] [--data-dir PATH] [--demo]``."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .settings import Settings


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="scalewright", description="Scalewright: trim a draft item pool together.")
    sub = p.add_subparsers(dest="command", required=True)
    s = sub.add_parser("serve", help="start the dashboard")
    s.add_argument("--host", default="127.0.0.1",
                   help="address to bind (default 127.0.0.1; anything else requires the access token)")
    s.add_argument("--port", type=int, default=8765, help="port (default 8765)")
    s.add_argument("--data-dir", type=Path, default=Path("data"),
                   help="folder for datasets, snapshots and the database (default ./data)")
    s.add_argument("--demo", action="store_true", help="load the built-in demo data on first start")
    s.add_argument("--max-upload-mb", type=float, default=100.0, help="largest upload in MB (default 100)")
    s.add_argument("--token", default=None,
                   help="access token for network sharing (default: generated when --host is not local)")
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    if args.command == "serve":
        import uvicorn

        from .app import create_app

        settings = Settings(host=args.host, port=args.port, data_dir=args.data_dir, demo=args.demo,
                            max_upload_mb=args.max_upload_mb, token=args.token)
        app = create_app(settings)
        shown_host = "127.0.0.1" if settings.host in ("0.0.0.0", "::") else settings.host
        url = f"http://{shown_host}:{settings.port}/"
        if settings.token:
            url += f"?token={settings.token}"
            print(f"Sharing beyond this machine: every request must carry the access token {settings.token}",
                  flush=True)
        print(f"Scalewright is running at {url}  (data folder: {settings.data_dir.resolve()})", flush=True)
        uvicorn.run(app, host=settings.host, port=settings.port, log_level="warning")
        return 0
    return 2


if __name__ == "__main__":
    sys.exit(main())
