"""Prometheus metrics for the API process, in the text exposition format."""

from __future__ import annotations

import time

from fastapi import APIRouter, Request, Response
from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from starlette.types import ASGIApp, Message, Receive, Scope, Send

REGISTRY = CollectorRegistry(auto_describe=True)
REQUESTS = Counter(
    "whichsense_http_requests_total",
    "HTTP requests answered, by method, route template and status code.",
    ["method", "route", "status"],
    registry=REGISTRY,
)
LATENCY = Histogram(
    "whichsense_http_request_seconds",
    "Time to answer an HTTP request, by route template.",
    ["route"],
    registry=REGISTRY,
)

router = APIRouter(tags=["operations"])


@router.get("/metrics", include_in_schema=True, summary="Prometheus metrics")
def metrics(request: Request) -> Response:
    """The process-wide registry, then the registries the app added (its queue gauges)."""
    registries = (REGISTRY, *getattr(request.app.state, "metric_registries", ()))
    body = b"".join(generate_latest(registry) for registry in registries)
    return Response(body, media_type=CONTENT_TYPE_LATEST)


class RequestMetrics:
    """ASGI middleware: count and time requests under their route template, not raw path."""

    def __init__(self, app: ASGIApp):
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = 500

        async def recording_send(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, recording_send)
        finally:
            route = scope.get("route")
            template = getattr(route, "path", "unmatched")
            LATENCY.labels(template).observe(time.perf_counter() - started)
            REQUESTS.labels(scope["method"], template, str(status)).inc()
