"""/docs in real headless Chromium: the interactive docs read our OpenAPI 3.1 document."""

from __future__ import annotations

import os
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest
import uvicorn

from service.api.app import create_app
from service.config import Settings

pytestmark = pytest.mark.browser

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
]


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


@pytest.fixture
def live_url(settings: Settings) -> Iterator[str]:
    """The API under uvicorn in a thread on a free loopback port."""
    port = _free_port()
    server = uvicorn.Server(
        uvicorn.Config(create_app(settings), host="127.0.0.1", port=port, log_level="warning")
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            pytest.fail("the API did not start")
        time.sleep(0.05)
    yield f"http://127.0.0.1:{port}"
    server.should_exit = True
    thread.join(timeout=10)


@pytest.mark.parametrize("database_url", ["sqlite"], indirect=True)
def test_docs_render_every_operation_offline(live_url: str, tmp_path: Path) -> None:
    if not Path(CHROMIUM).exists():  # scripts/install.sh --test installs it; CI must have it
        if os.environ.get("CI"):
            pytest.fail(f"no Chromium at {CHROMIUM}")
        pytest.skip(f"no Chromium at {CHROMIUM}")
    from playwright.sync_api import sync_playwright

    spec = httpx.get(f"{live_url}/openapi.json").json()
    assert spec["openapi"].startswith("3.1")
    operations = [(method.upper(), path) for path, item in spec["paths"].items() for method in item]
    outside: list[str] = []
    with sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        page.on(
            "request",
            lambda request: (
                None if request.url.startswith((live_url, "data:")) else outside.append(request.url)
            ),
        )
        page.goto(f"{live_url}/docs")
        page.wait_for_selector(".opblock", timeout=30_000)
        page.screenshot(path=str(tmp_path / "docs.png"), full_page=True)
        errors = page.locator(".errors-wrapper, .version-pragma").all_inner_texts()
        shown = {
            (
                block.locator(".opblock-summary-method").inner_text().strip(),
                block.locator(".opblock-summary-path").get_attribute("data-path"),
            )
            for block in page.locator(".opblock").all()
        }
        title = page.locator(".info .title").inner_text()
        browser.close()
    assert not errors, errors
    assert "whichsense" in title
    assert set(operations) <= shown, sorted(set(operations) - shown)
    assert not outside, outside
    assert (tmp_path / "docs.png").stat().st_size > 10_000
