"""The service runs: the real API and worker processes on loopback, timed from the
submission of one batch to the last result fetched.

Each database gets the demo inventory and an ingest key through the CLI, the
API (`serve --no-worker`) and N `worker` processes start, a small warm-up batch
builds every worker's engine, then the timed batch goes in. The worker's peak
memory is its kernel high-water mark (VmHWM in /proc/PID/status).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import tempfile
import time
import uuid
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from service.bench.figures import Measured

Progress = Callable[[int], None]
ProgressBar = Callable[[], Any]  # a tqdm-like context manager with update(n)
TERMINAL = {"done", "failed", "cancelled"}
START_TIMEOUT_S = 600.0
BATCH_TIMEOUT_S = 3600.0
POLL_S = 0.2  # worker idle poll
STATUS_POLL_S = 0.5  # how often the client asks for the batch state, as a pipeline would


@dataclass(frozen=True)
class ServiceRun(Measured):
    """`cpu_seconds`: CPU time the API and worker processes spent on the timed batch."""

    peak_rss_mb: float = 0.0
    sync_ms: tuple[float, ...] = ()


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def peak_rss_mb(pid: int) -> float:
    """The process's resident-set high-water mark (Linux), in MiB; 0 when unknown."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process so far (Linux /proc/PID/stat); 0 when unknown."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def postgres_reachable(admin_url: str) -> str | None:
    """None when a PostgreSQL server answers at `admin_url`, else why not."""
    try:
        engine = create_engine(admin_url, connect_args={"connect_timeout": 3})
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        engine.dispose()
    except Exception as exc:  # any driver or network failure means "skip", with the reason
        return f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
    return None


@contextmanager
def postgres_database(admin_url: str) -> Iterator[str]:
    """A throwaway database on the server at `admin_url`; dropped afterwards."""
    name = f"whichsense_bench_{uuid.uuid4().hex[:8]}"
    admin = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield make_url(admin_url).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


class Deployment:
    """API + workers on one database, started from the CLI as a team would."""

    def __init__(self, database_url: str, inventory_path: Path, logs: Path) -> None:
        self.env = {k: v for k, v in os.environ.items() if k != "WHICHSENSE_DATABASE_URL"}
        self.env.update(WHICHSENSE_DATABASE_URL=database_url, HF_HUB_OFFLINE="1",
                        TRANSFORMERS_OFFLINE="1")
        self.cli = [sys.executable, "-m", "service.cli.main"]
        self.logs = logs
        self.api: subprocess.Popen[bytes] | None = None
        self.workers: list[subprocess.Popen[bytes]] = []
        self._run("db", "upgrade")
        self._run("inventory", "import", str(inventory_path))
        created = self._run("keys", "create", "--scope", "ingest")
        self.token = next(w for w in created.split() if w.startswith("ws_"))
        self.inventory = json.loads(inventory_path.read_text("utf-8"))["name"]
        self.base = ""

    def _run(self, *args: str) -> str:
        done = subprocess.run([*self.cli, *args], env=self.env, capture_output=True, text=True)
        if done.returncode != 0:
            raise RuntimeError(f"whichsense {' '.join(args)} failed: {done.stderr[-2000:]}")
        return done.stdout

    def _spawn(self, name: str, *args: str) -> subprocess.Popen[bytes]:
        log = (self.logs / f"{name}.log").open("wb")
        return subprocess.Popen([*self.cli, *args], env=self.env, stdout=log,
                                stderr=subprocess.STDOUT)

    def start_api(self) -> None:
        port = _free_port()
        self.api = self._spawn("api", "serve", "--no-worker", "--port", str(port))
        self.base = f"http://127.0.0.1:{port}"
        self._wait(lambda: self._healthy(), "the API")

    def add_worker(self) -> None:
        number = len(self.workers)
        self.workers.append(
            self._spawn(f"worker-{number}", "worker", "--name", f"bench-{number}",
                        "--poll-seconds", str(POLL_S))
        )
        log = self.logs / f"worker-{number}.log"
        self._wait(lambda: " ready" in log.read_text(errors="replace"), f"worker {number}")

    def _healthy(self) -> bool:
        try:
            return httpx.get(f"{self.base}/healthz", timeout=2).status_code == 200
        except httpx.HTTPError:
            return False

    def _wait(self, ready: Callable[[], bool], what: str) -> None:
        deadline = time.monotonic() + START_TIMEOUT_S
        while not ready():
            for process in [self.api, *self.workers]:
                if process is not None and process.poll() is not None:
                    raise RuntimeError(f"{what} exited; logs in {self.logs}")
            if time.monotonic() > deadline:
                raise RuntimeError(f"{what} did not start; logs in {self.logs}")
            time.sleep(0.3)

    def client(self) -> httpx.Client:
        return httpx.Client(base_url=self.base, timeout=600,
                            headers={"Authorization": f"Bearer {self.token}"})

    def run_batch(self, documents: Sequence[dict[str, Any]], progress: Progress | None) -> int:
        """Submit, follow, fetch every result; the number of results fetched."""
        with self.client() as http:
            response = http.post(
                "/v1/batches",
                json={"inventory": self.inventory, "documents": list(documents),
                      "options": {"rationale": True}},
            )
            if response.status_code != 202:
                raise RuntimeError(f"submission refused: {response.status_code} {response.text}")
            batch = response.json()["id"]
            deadline = time.monotonic() + BATCH_TIMEOUT_S
            seen = 0
            while True:
                status = http.get(f"/v1/batches/{batch}").json()
                done = int(status["counts"]["processed_occurrences"])
                if progress is not None and done > seen:
                    progress(done - seen)
                    seen = done
                if status["state"] in TERMINAL:
                    break
                if time.monotonic() > deadline:
                    raise RuntimeError(f"batch {batch} did not finish; logs in {self.logs}")
                time.sleep(STATUS_POLL_S)
            if status["state"] != "done":
                raise RuntimeError(f"batch {batch} ended {status['state']}; logs in {self.logs}")
            results = http.get(f"/v1/batches/{batch}/results",
                               headers={"Accept": "application/x-ndjson"})
            results.raise_for_status()
            return sum(1 for line in results.text.splitlines() if line.strip())

    def sync_latencies(self, sentences: Sequence[str], count: int) -> list[float]:
        """Milliseconds of `count` sequential one-document POST /v1/disambiguate calls."""
        timings = []
        with self.client() as http:
            for i in range(count + 5):
                body = {"inventory": self.inventory,
                        "documents": [{"id": f"s{i}", "text": sentences[i % len(sentences)]}]}
                started = time.perf_counter()
                response = http.post("/v1/disambiguate", json=body)
                elapsed = (time.perf_counter() - started) * 1000
                if response.status_code != 200:
                    raise RuntimeError(f"disambiguate: {response.status_code} {response.text}")
                if i >= 5:  # the first calls build the API process's engine
                    timings.append(elapsed)
        return timings

    def cpu_seconds(self) -> float:
        """CPU time of the API and every worker so far."""
        return sum(cpu_seconds(p.pid) for p in [self.api, *self.workers] if p is not None)

    def worker_peak_rss_mb(self) -> float:
        return max((peak_rss_mb(w.pid) for w in self.workers), default=0.0)

    def stop(self) -> None:
        processes = [p for p in [self.api, *self.workers] if p is not None]
        for process in processes:
            if process.poll() is None:
                process.send_signal(signal.SIGTERM)
        for process in processes:
            try:
                process.wait(60)
            except subprocess.TimeoutExpired:
                process.kill()


def measure(
    database_url: str,
    inventory_path: Path,
    documents: Sequence[dict[str, Any]],
    warmup: Sequence[dict[str, Any]],
    workers: int,
    progress_bar: ProgressBar,
    *,
    sync_sentences: Sequence[str] = (),
    sync_count: int = 0,
) -> ServiceRun:
    """One deployment: start it, warm it, time one batch (and the sync endpoint), stop it."""
    logs = Path(tempfile.mkdtemp(prefix="whichsense-bench-"))
    deployment = Deployment(database_url, inventory_path, logs)
    try:
        deployment.start_api()
        for _ in range(workers):
            deployment.add_worker()
        deployment.run_batch([dict(d, id=f"warm-{d['id']}") for d in warmup], None)
        with progress_bar() as bar:  # opened now, so start-up does not count in its rate
            started, cpu = time.perf_counter(), deployment.cpu_seconds()
            occurrences = deployment.run_batch(documents, bar.update)
            seconds = time.perf_counter() - started
            cpu = deployment.cpu_seconds() - cpu
        rss = deployment.worker_peak_rss_mb()
        sync = deployment.sync_latencies(sync_sentences, sync_count) if sync_count else []
        return ServiceRun(occurrences, seconds, cpu, rss, tuple(sync))
    finally:
        deployment.stop()
