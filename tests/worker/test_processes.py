"""Real processes: two `whichsense worker`s on one PostgreSQL batch, a worker killed with
SIGKILL mid-chunk, and `whichsense serve` (embedded worker) restarted mid-batch.

Each subprocess loads its own encoder (several seconds), so these tests are few and
their batches small; leases are 2 seconds so a dead worker's chunk comes back quickly.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy import select

from service.store.database import session_scope
from service.store.models import BatchChunk
from tests.conftest import REPO
from tests.pipeline import FAST, assert_same_results, documents, free_port, ndjson

pytestmark = pytest.mark.slow
START_SECONDS = 180.0


def _env(database_url: str, **extra: str) -> dict[str, str]:
    env = {
        key: value
        for key, value in os.environ.items()
        if not key.startswith("WHICHSENSE_") or key == "WHICHSENSE_TEST_POSTGRES_URL"
    }
    env.update(
        WHICHSENSE_DATABASE_URL=database_url,
        HF_HUB_OFFLINE="1",
        TRANSFORMERS_OFFLINE="1",
        PYTHONUNBUFFERED="1",
    )
    env.setdefault("WHICHSENSE_LEASE_SECONDS", "2")
    env.update(extra)
    return env


class Process:
    """A `whichsense` subcommand in its own process, its output in a log file."""

    def __init__(self, args: list[str], env: dict[str, str], log: Path) -> None:
        self.log = log
        self._handle = log.open("wb")
        self.popen = subprocess.Popen(
            [sys.executable, "-m", "service.cli.main", *args],
            cwd=REPO,
            env=env,
            stdout=self._handle,
            stderr=subprocess.STDOUT,
        )

    def text(self) -> str:
        return self.log.read_text(errors="replace")

    def wait_for(self, words: str, timeout: float = START_SECONDS) -> None:
        deadline = time.monotonic() + timeout
        while words not in self.text():
            assert self.popen.poll() is None, f"exited early:\n{self.text()[-3000:]}"
            assert time.monotonic() < deadline, f"no {words!r} in time:\n{self.text()[-3000:]}"
            time.sleep(0.1)

    def signal(self, number: int) -> None:
        if self.popen.poll() is None:
            os.kill(self.popen.pid, number)

    def stop(self, timeout: float = 60.0) -> int:
        self.signal(signal.SIGTERM)
        try:
            return self.popen.wait(timeout)
        finally:
            self.close()

    def close(self) -> None:
        if self.popen.poll() is None:
            self.popen.kill()
            self.popen.wait(10)
        self._handle.close()


@pytest.fixture
def processes() -> Iterator[list[Process]]:
    """Every process a test starts is killed at the end, pass or fail."""
    started: list[Process] = []
    yield started
    for process in started:
        process.close()


def _wait(condition: Callable[[], Any], timeout: float, what: str) -> Any:
    deadline = time.monotonic() + timeout
    while True:
        value = condition()
        if value:
            return value
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.1)


def _chunks(settings: Any, batch_id: str) -> list[tuple[str, str | None, int]]:
    with session_scope(settings) as session:
        return [
            (c.state, c.lease_owner, c.attempts)
            for c in session.scalars(
                select(BatchChunk).where(BatchChunk.batch_id == batch_id).order_by(BatchChunk.id)
            )
        ]


def _require(database_url: str, backend: str) -> None:
    if not database_url.startswith(backend):
        pytest.skip(f"this scenario runs on {backend} only")


def test_two_worker_processes_process_every_occurrence_once(
    make_pipeline, database_url, processes, tmp_path
):
    _require(database_url, "postgresql")
    pipe = make_pipeline(chunk_size=1)
    env = _env(database_url, WHICHSENSE_LEASE_SECONDS="30")  # no lease may run out here
    for name in ("worker-a", "worker-b"):
        args = ["worker", "--name", name, "--poll-seconds", "0.1", "--retry-base-seconds", "0"]
        processes.append(Process(args, env, tmp_path / f"{name}.log"))
    for process in processes:
        process.wait_for("ready")
    docs = documents(24)
    batch = pipe.submit(docs)
    _wait(lambda: pipe.status(batch["id"])["state"] == "done", 180, "the batch to finish")
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(docs))
    chunks = _chunks(pipe.settings, batch["id"])
    assert {owner for _, owner, _ in chunks} == {"worker-a", "worker-b"}  # both took part
    assert all(attempts == 1 for _, _, attempts in chunks)  # none was done twice
    assert [process.stop() for process in processes] == [0, 0]  # SIGTERM: a clean exit


def test_a_worker_killed_mid_chunk_loses_nothing(make_pipeline, database_url, processes, tmp_path):
    _require(database_url, "postgresql")
    pipe = make_pipeline(chunk_size=1)
    victim = Process(
        ["worker", "--name", "victim", "--poll-seconds", "0.1", "--retry-base-seconds", "0"],
        _env(database_url),
        tmp_path / "victim.log",
    )
    processes.append(victim)
    victim.wait_for("ready")
    docs = documents(40)
    batch = pipe.submit(docs)
    _wait(
        lambda: any(
            o == "victim" and s == "done" for s, o, _ in _chunks(pipe.settings, batch["id"])
        ),
        120,
        "the victim to finish a chunk",
    )
    held = None
    for _ in range(200):  # freeze the victim until we catch it holding a lease, then kill it
        victim.signal(signal.SIGSTOP)
        leased = [
            i
            for i, (s, o, _) in enumerate(_chunks(pipe.settings, batch["id"]))
            if s == "leased" and o == "victim"
        ]
        if leased:
            held = leased[0]
            victim.signal(signal.SIGKILL)
            break
        victim.signal(signal.SIGCONT)
        time.sleep(0.02)
    assert held is not None, "never caught the victim holding a lease"
    assert victim.popen.wait(10) == -signal.SIGKILL
    assert pipe.status(batch["id"])["state"] == "running"  # killed mid-batch
    survivor = pipe.worker(name="survivor", policy=FAST)
    thread = threading.Thread(target=survivor.run, daemon=True)
    thread.start()
    try:
        _wait(lambda: pipe.status(batch["id"])["state"] == "done", 120, "the batch to finish")
    finally:
        survivor.stop.set()
        thread.join(30)
    state, owner, attempts = _chunks(pipe.settings, batch["id"])[held]
    assert (state, owner, attempts) == ("done", "survivor", 2)  # reclaimed after expiry
    assert_same_results(pipe.all_results(batch["id"]), pipe.sync_results(docs))


def test_restarting_the_api_mid_batch_loses_nothing(
    make_pipeline, database_url, processes, tmp_path
):
    _require(database_url, "sqlite")
    pipe = make_pipeline()
    env = _env(database_url, WHICHSENSE_CHUNK_SIZE="1")

    def serve(log: str) -> tuple[Process, str]:
        port = free_port()
        server = Process(["serve", "--port", str(port)], env, tmp_path / log)
        processes.append(server)
        server.wait_for("Uvicorn running")
        return server, f"http://127.0.0.1:{port}"

    server, base = serve("first.log")
    docs = documents(30)
    body = ndjson({"inventory": "tiny-shop", "options": {"rationale": False}}, *docs)
    with httpx.Client(base_url=base, headers=pipe.ingest, timeout=60) as http:
        submitted = http.post(
            "/v1/batches", content=body, headers={"Content-Type": "application/x-ndjson"}
        )
        assert submitted.status_code == 202, submitted.text
        batch_id = submitted.json()["id"]

        def processed() -> int:
            return http.get(f"/v1/batches/{batch_id}").json()["counts"]["processed_documents"]

        _wait(lambda: processed() >= 3, 120, "some documents to be processed")
    # SIGTERM: uvicorn shuts down gracefully (and re-raises the signal), the embedded
    # worker finishes its chunk and stops before the process ends.
    assert server.stop() in (0, -signal.SIGTERM)
    log = server.text()
    assert log.index("embedded worker") < log.index("stopped") < log.index("shutdown complete")
    chunks = _chunks(pipe.settings, batch_id)
    assert not [c for c in chunks if c[0] == "leased"]  # finished or handed back, never held
    assert sum(c[0] == "done" for c in chunks) < len(docs)  # stopped mid-batch

    server, base = serve("second.log")
    with httpx.Client(base_url=base, headers=pipe.ingest, timeout=60) as http:
        _wait(
            lambda: http.get(f"/v1/batches/{batch_id}").json()["state"] == "done",
            180,
            "the batch to finish after the restart",
        )
        streamed = http.get(
            f"/v1/batches/{batch_id}/results", headers={"Accept": "application/x-ndjson"}
        )
    assert server.stop() in (0, -signal.SIGTERM)

    results = [json.loads(line) for line in streamed.text.splitlines()]
    assert_same_results(results, pipe.sync_results(docs))
