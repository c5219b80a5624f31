"""One worker thread inside `whichsense serve`, for single-host setups.

The thread starts after the app's own startup (migration check) and is told
to stop when the server shuts down (SIGTERM to uvicorn): it finishes or
releases its chunk, as a `whichsense worker` process would.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

from fastapi import FastAPI
from starlette.concurrency import run_in_threadpool

from service.api.metrics import REGISTRY
from service.batches.taggers import EngineTagger
from service.config import Settings
from worker import metrics
from worker.loop import Worker

log = logging.getLogger(__name__)
_registered = False


def _expose_metrics() -> None:
    global _registered
    if not _registered:
        for collector in metrics.ALL:
            REGISTRY.register(collector)
        _registered = True


def attach(app: FastAPI, settings: Settings, *, join_seconds: float = 60.0) -> Worker:
    """Run a worker thread for the lifetime of `app`; returns the worker."""
    worker = Worker(settings, name=None)
    inner = app.router.lifespan_context
    _expose_metrics()

    @asynccontextmanager
    async def lifespan(application: FastAPI) -> AsyncIterator[Any]:
        async with inner(application) as state:
            tagger = worker.tagger
            if isinstance(tagger, EngineTagger):
                await run_in_threadpool(tagger.preload)
            thread = threading.Thread(target=worker.run, name="whichsense-worker", daemon=True)
            thread.start()
            log.info("embedded worker %s running", worker.name)
            try:
                yield state
            finally:
                worker.stop.set()
                await run_in_threadpool(thread.join, join_seconds)

    app.router.lifespan_context = lifespan
    app.state.worker = worker
    return worker
