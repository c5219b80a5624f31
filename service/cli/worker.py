"""`whichsense worker`: process batches from the database until told to stop.

SIGTERM or SIGINT: finish (or release) the current chunk, then exit 0; a
second signal exits at once (the chunk's lease then expires and another worker
takes it over). Run as many as you like against one PostgreSQL database.
"""

from __future__ import annotations

import argparse
import logging
import signal
import threading
from types import FrameType

from service.config import get_settings
from service.store.database import require_migrated

log = logging.getLogger(__name__)


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "worker", help="process submitted batches (run many against one PostgreSQL)"
    )
    parser.add_argument("--name", help="worker name shown on leases (default host:pid:random)")
    parser.add_argument(
        "--poll-seconds", type=float, default=1.0, help="sleep between polls when idle"
    )
    parser.add_argument(
        "--retry-base-seconds",
        type=float,
        default=5.0,
        help="backoff before retrying a chunk with failed documents (doubles per try)",
    )
    parser.add_argument(
        "--webhook-retry-base-seconds",
        type=float,
        default=10.0,
        help="backoff before retrying a webhook (doubles per try, at most an hour)",
    )
    parser.add_argument(
        "--webhook-max-attempts", type=int, default=8, help="webhook tries before giving up"
    )
    parser.add_argument(
        "--metrics-port", type=int, help="serve Prometheus metrics on this port (127.0.0.1)"
    )
    parser.add_argument("--until-idle", action="store_true", help="exit once nothing is left to do")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from service.batches.processing import RetryPolicy
    from service.batches.taggers import EngineTagger
    from service.batches.webhooks.sending import WebhookPolicy
    from worker.loop import Worker, WorkerPolicy

    settings = get_settings()
    require_migrated(settings.database_url)
    policy = WorkerPolicy(
        poll_seconds=args.poll_seconds,
        retry=RetryPolicy(base_seconds=args.retry_base_seconds),
        webhooks=WebhookPolicy(
            max_attempts=args.webhook_max_attempts, base_seconds=args.webhook_retry_base_seconds
        ),
    )
    stop = threading.Event()
    worker = Worker(settings, name=args.name, policy=policy, stop=stop)
    if isinstance(worker.tagger, EngineTagger):
        worker.tagger.preload()
    if args.metrics_port:
        from prometheus_client import start_http_server

        from worker.metrics import REGISTRY

        start_http_server(args.metrics_port, addr="127.0.0.1", registry=REGISTRY)

    def on_signal(number: int, _frame: FrameType | None) -> None:
        log.info("signal %d: finishing the current chunk, then stopping", number)
        stop.set()
        signal.signal(number, signal.SIG_DFL)

    signal.signal(signal.SIGTERM, on_signal)
    signal.signal(signal.SIGINT, on_signal)
    log.info("worker %s ready", worker.name)
    if args.until_idle:
        worker.run_until_idle()
    else:
        worker.run()
    return 0
