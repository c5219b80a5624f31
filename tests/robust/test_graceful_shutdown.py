"""SIGTERM stops the real server within its grace period even with a request in flight.

uvicorn waits for in-flight requests without limit unless told otherwise; a
client trickling a body (or a stuck request) would keep a stopping server alive.
`whichsense serve` passes WHICHSENSE_SHUTDOWN_GRACE_SECONDS as uvicorn's
graceful-shutdown timeout.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

from service.store import database
from tests.pipeline import free_port

REPO = Path(__file__).resolve().parent.parent.parent
GRACE_SECONDS = 2


def test_sigterm_ends_the_server_within_its_grace_period(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'shutdown.db'}"
    database.upgrade(url)
    env = {k: v for k, v in os.environ.items() if not k.startswith("WHICHSENSE_")}
    env.update(
        WHICHSENSE_DATABASE_URL=url,
        WHICHSENSE_SHUTDOWN_GRACE_SECONDS=str(GRACE_SECONDS),
        HF_HUB_OFFLINE="1",
        PYTHONPATH=str(REPO),
    )
    port = free_port()
    server = subprocess.Popen(
        [sys.executable, "-m", "service.cli.main", "serve", "--no-worker", "--port", str(port)],
        cwd=REPO,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        ready_by = time.monotonic() + 120
        while True:
            try:
                if httpx.get(f"http://127.0.0.1:{port}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            assert server.poll() is None and time.monotonic() < ready_by, "server did not start"
            time.sleep(0.3)
        # A request in flight: headers promise a large body, only a little of it arrives.
        slow = socket.create_connection(("127.0.0.1", port))
        slow.sendall(
            b"POST /v1/batches HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
            b'Content-Length: 100000\r\n\r\n{"inventory": "x", '
        )
        time.sleep(1)
        assert server.poll() is None
        stopped_at = time.monotonic()
        server.send_signal(signal.SIGTERM)
        server.wait(timeout=GRACE_SECONDS + 20)  # generous for a loaded machine; never hangs
        took = time.monotonic() - stopped_at
        assert took >= GRACE_SECONDS - 0.5  # the in-flight request was given its grace period
        slow.close()
    finally:
        if server.poll() is None:
            server.kill()
            server.wait()
