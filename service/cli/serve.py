"""`whichsense serve`: the HTTP API under uvicorn, optionally with an in-process worker."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from service.config import Settings


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("serve", help="run the HTTP API")
    parser.add_argument("--host", help="listen address (default: WHICHSENSE_HOST, 127.0.0.1)")
    parser.add_argument("--port", type=int, help="TCP port (default: WHICHSENSE_PORT, 8000)")
    parser.add_argument(
        "--no-worker",
        action="store_true",
        help="do not run a worker in this process (use `whichsense worker` elsewhere)",
    )
    parser.set_defaults(func=run)


def run(args: argparse.Namespace, settings: Settings) -> int:
    import uvicorn

    from service.api.app import create_app
    from service.store.database import require_migrated
    from worker.embedded import attach

    require_migrated(settings.database_url)
    app = create_app(settings)
    if not args.no_worker:
        attach(app, settings)
    host = args.host if args.host is not None else settings.host
    port = args.port if args.port is not None else settings.port
    uvicorn.run(
        app,
        host=host,
        port=port,
        log_level="info",
        # SIGTERM: stop accepting, let requests in flight finish this long, then cut them off.
        timeout_graceful_shutdown=max(1, round(settings.shutdown_grace_seconds)),
    )
    return 0
