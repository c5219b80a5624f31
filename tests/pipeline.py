"""Helpers and fixtures shared by the batch and worker tests (imported by their conftests)."""

from __future__ import annotations

import http.server
import json
import queue
import socket
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import func, select

from service.api.app import create_app
from service.batches.processing import RetryPolicy
from service.batches.webhooks.sending import WebhookPolicy
from service.config import Settings, resolve_model_dir
from service.store.database import session_scope
from service.store.inventories import create_inventory
from service.store.models import ApiKey, Batch
from service.tagging.engines import shared_engines
from tests.conftest import bearer
from worker.loop import Worker, WorkerPolicy

FAST = WorkerPolicy(
    poll_seconds=0.05,
    heartbeat_seconds=0.2,
    retry=RetryPolicy(base_seconds=0.0),
    webhooks=WebhookPolicy(max_attempts=3, base_seconds=0.0),
)

SENTENCES = [
    "I caught a bass at the lake before sunrise.",
    "The bass line in that song shakes the floor.",
    "My mouse stopped working, so I bought a wireless one.",
    "A mouse ran across the kitchen and hid behind the oven.",
    "He tuned the bass guitar and plugged it into the amplifier.",
    "We grilled the bass we had caught with lemon and herbs.",
    "Click twice with the mouse to open the file.",
    "The cat watched the mouse hole all night.",
]


def documents(count: int, prefix: str = "doc") -> list[dict[str, Any]]:
    """`count` short documents with two or three occurrences each."""
    return [
        {
            "id": f"{prefix}-{i}",
            "text": f"{SENTENCES[i % len(SENTENCES)]} {SENTENCES[(i * 3 + 1) % len(SENTENCES)]}",
            "metadata": {"n": i},
        }
        for i in range(count)
    ]


def ndjson(*lines: Any) -> bytes:
    return b"".join(json.dumps(line).encode() + b"\n" for line in lines)


@dataclass
class Pipeline:
    """A test client, keys and in-process workers over one test database."""

    settings: Settings
    client: TestClient
    keys: dict[str, str]
    team_id: int

    @property
    def ingest(self) -> dict[str, str]:
        return bearer(self.keys["ingest"])

    def submit(
        self, docs: list[dict[str, Any]], *, rationale: bool = False, **extra: Any
    ) -> dict[str, Any]:
        """Submit as JSON; without rationales unless asked (they cost extra encoder passes)."""
        response = self.client.post(
            "/v1/batches",
            json={
                "inventory": "tiny-shop",
                "documents": docs,
                "options": {"rationale": rationale},
                **extra,
            },
            headers=self.ingest,
        )
        assert response.status_code == 202, response.text
        return response.json()

    def worker(self, **kwargs: Any) -> Worker:
        kwargs.setdefault("policy", FAST)
        return Worker(self.settings, **kwargs)

    def status(self, batch_id: str) -> dict[str, Any]:
        response = self.client.get(f"/v1/batches/{batch_id}", headers=self.ingest)
        assert response.status_code == 200, response.text
        return response.json()

    def all_results(self, batch_id: str, **filters: Any) -> list[dict[str, Any]]:
        results: list[dict[str, Any]] = []
        cursor = None
        while True:
            params = {**filters, "limit": 7, **({"cursor": cursor} if cursor else {})}
            page = self.client.get(
                f"/v1/batches/{batch_id}/results", params=params, headers=self.ingest
            )
            assert page.status_code == 200, page.text
            results.extend(page.json()["results"])
            cursor = page.json()["next_cursor"]
            if cursor is None:
                return results

    def sync_results(
        self, docs: list[dict[str, Any]], *, rationale: bool = False
    ) -> list[dict[str, Any]]:
        results: list[dict[str, Any]] = []
        size = self.settings.max_sync_documents
        for first in range(0, len(docs), size):
            response = self.client.post(
                "/v1/disambiguate",
                json={
                    "inventory": "tiny-shop",
                    "documents": docs[first : first + size],
                    "options": {"rationale": rationale},
                },
                headers=self.ingest,
            )
            assert response.status_code == 200, response.text
            results.extend(response.json()["results"])
        return results

    def signing_secret(self, scope: str = "ingest") -> str:
        key_id = self.keys[scope].split("_", 2)[1]
        with session_scope(self.settings) as session:
            return session.scalars(
                select(ApiKey.signing_secret).where(ApiKey.key_id == key_id)
            ).one()

    def stored_batches(self) -> int:
        with session_scope(self.settings) as session:
            return int(session.scalar(select(func.count()).select_from(Batch)) or 0)


def decision(result: dict[str, Any]) -> tuple[Any, ...]:
    """What must agree between two runs over the same document (confidence compared apart)."""
    return (
        result["document_id"],
        result["field"],
        result["occurrence_index"],
        result["start"],
        result["end"],
        result["term"],
        result["sense_id"],
        result["status"],
        result["inventory_version"],
    )


def assert_same_results(got: list[dict[str, Any]], expected: list[dict[str, Any]]) -> None:
    """Same occurrences, same decisions, confidences equal up to float noise."""

    def key(r: dict[str, Any]) -> tuple[str, str, int]:
        return (r["document_id"], r["field"], r["occurrence_index"])

    assert len(got) == len({key(r) for r in got}), "a result was stored twice"
    by_key = {key(r): r for r in got}
    assert sorted(by_key) == sorted(key(r) for r in expected)
    for want in expected:
        have = by_key[key(want)]
        assert decision(have) == decision(want)
        assert abs(have["confidence"] - want["confidence"]) < 2e-3


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


@dataclass
class Receiver:
    """A tiny webhook receiver on 127.0.0.1 that records requests and answers scripted codes."""

    url: str
    requests: queue.Queue[tuple[dict[str, str], bytes]] = field(default_factory=queue.Queue)
    answers: list[int] = field(default_factory=list)


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    state = Receiver(url="")

    class Handler(http.server.BaseHTTPRequestHandler):
        def do_POST(self) -> None:
            body = self.rfile.read(int(self.headers.get("content-length", "0")))
            state.requests.put(({k.lower(): v for k, v in self.headers.items()}, body))
            code = state.answers.pop(0) if state.answers else 200
            self.send_response(code)
            self.send_header("content-length", "0")
            self.end_headers()

        def log_message(self, *_args: Any) -> None:
            return

    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    state.url = f"http://127.0.0.1:{server.server_address[1]}/hooks/batch"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield state
    server.shutdown()
    server.server_close()


@pytest.fixture(scope="session")
def warm_engines(encoder: Any) -> None:
    """Load the encoder once for the whole test session (every engine then shares it)."""
    assert shared_engines().encoder(resolve_model_dir(Settings())) is encoder


@pytest.fixture
def make_pipeline(
    settings: Settings,
    api_keys: dict[str, str],
    team_id: int,
    inventory_document: dict[str, Any],
    warm_engines: Any,
) -> Iterator[Any]:
    """Build a Pipeline over the test database with some settings changed."""
    clients: list[TestClient] = []
    with session_scope(settings) as session:
        create_inventory(session, team_id, inventory_document)

    def build(**overrides: Any) -> Pipeline:
        chosen = settings.model_copy(update=overrides)
        client = TestClient(create_app(chosen), raise_server_exceptions=False)
        client.__enter__()
        clients.append(client)
        return Pipeline(chosen, client, api_keys, team_id)

    yield build
    for client in clients:
        client.__exit__(None, None, None)


@pytest.fixture
def pipeline(make_pipeline: Any) -> Pipeline:
    return make_pipeline()
