"""`whichsense serve`: the HTTP API under uvicorn, optionally with an in-process worker."""

from __future__ import annotations

import argparse
import importlib

import uvicorn

from service.api.app import create_app
from service.config import get_settings
from service.store.database import require_migrated


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("serve", help="run the HTTP API")
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, default=8000)
    parser.add_argument(
        "--no-worker",
        action="store_true",
        help="do not run a worker in this process (use `whichsense worker` elsewhere)",
    )
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    settings = get_settings()
    require_migrated(settings.database_url)
    app = create_app(settings)
    if not args.no_worker:
        attach = _in_process_worker()
        if attach is not None:
            attach(app, settings)
    uvicorn.run(
        app,
        host=args.host,
        port=args.port,
        log_level="info",
        # SIGTERM: stop accepting, let requests in flight finish this long, then cut them off.
        timeout_graceful_shutdown=max(1, round(settings.shutdown_grace_seconds)),
    )
    return 0


def _in_process_worker():  # type: ignore[no-untyped-def]
    """The worker's hook for embedded mode, when the worker package provides one."""
    try:
        module = importlib.import_module("worker.embedded")
    except ModuleNotFoundError as exc:
        if exc.name not in ("worker.embedded", "worker"):
            raise
        return None
    return module.attach
