"""The review pages in real headless Chromium (Debian's chromium, driven by Playwright).

A uvicorn server runs the app on a free loopback port over the test's SQLite database;
screenshots of the queue and item pages go to tmp/screenshots/ (ignored by git).
"""

from __future__ import annotations

import statistics
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select

from service.store.database import session_scope
from service.store.models import ReviewDecision, ReviewItem
from tests.conftest import REPO, bearer, team_keys
from tests.pipeline import free_port
from tests.review.conftest import gold_for_document, queue_documents

pytestmark = [
    pytest.mark.browser,
    pytest.mark.slow,
    pytest.mark.parametrize("database_url", ["sqlite"], indirect=True),
]
CHROMIUM = "/usr/bin/chromium"
SHOTS = REPO / "tmp" / "screenshots"


class Live:
    def __init__(self, base: str, settings: Any, pipeline: Any, batch_id: str):
        self.base = base
        self.settings = settings
        self.pipeline = pipeline
        self.batch_id = batch_id


@pytest.fixture
def live(make_pipeline: Any) -> Iterator[Live]:
    import uvicorn

    from service.api.app import create_app

    built = make_pipeline()
    batch = built.submit(queue_documents(copies=3), rationale=True)
    built.worker().run_until_idle()
    port = free_port()
    server = uvicorn.Server(
        uvicorn.Config(create_app(built.settings), host="127.0.0.1", port=port, log_level="warning")
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started
    yield Live(f"http://127.0.0.1:{port}", built.settings, built, batch["id"])
    server.should_exit = True
    thread.join(timeout=10)


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    if not Path(CHROMIUM).exists():
        pytest.skip("Debian's chromium is not installed (scripts/install.sh installs it)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        launched = playwright.chromium.launch(
            executable_path=CHROMIUM,
            args=[
                "--no-sandbox",
                "--disable-gpu",
                "--disable-background-networking",
                "--disable-component-update",
            ],
        )
        yield launched
        launched.close()


def sign_in(browser: Any, live: Live, key: str) -> Any:
    context = browser.new_context(viewport={"width": 1360, "height": 900})
    page = context.new_page()
    page.goto(f"{live.base}/review")
    assert page.url.endswith("/review/sign-in")
    page.get_by_label("API key").fill(key)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"{live.base}/review")
    return page


def decide_by_keyboard(page: Any) -> float:
    """Press the digit of the gold sense on the current item page; seconds to the next page."""
    document_id = page.locator("h1 .mono").first.inner_text().strip()
    gold = gold_for_document(document_id)
    key = page.locator(f'button.choose[value="{gold}"]').get_attribute("data-key")
    assert key is not None
    before = page.url
    started = time.perf_counter()
    page.keyboard.press(key)
    page.wait_for_function("url => location.href !== url", arg=before)
    page.wait_for_load_state("domcontentloaded")
    return time.perf_counter() - started


def _count(settings: Any, *conditions: Any) -> int:
    with session_scope(settings) as session:
        return int(
            session.scalar(select(func.count()).select_from(ReviewDecision).where(*conditions)) or 0
        )


def test_review_three_items_with_the_keyboard_then_undo(browser: Any, live: Live) -> None:
    SHOTS.mkdir(parents=True, exist_ok=True)
    page = sign_in(browser, live, live.pipeline.keys["review"])
    assert page.locator("#queue-title").is_visible()
    page.screenshot(path=str(SHOTS / "queue.png"), full_page=True)
    with session_scope(live.settings) as session:
        before = {i.id: i.confidence for i in session.scalars(select(ReviewItem))}
    page.get_by_role("button", name="Start reviewing").click()
    page.wait_for_url("**/review/items/*")
    page.screenshot(path=str(SHOTS / "item.png"), full_page=True)
    # keyboard-reachable: Tab from the top reaches the skip link first, then the page's controls
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.className") == "skip-link"
    decided_pages = []
    for _ in range(3):
        decided_pages.append(page.url)
        decide_by_keyboard(page)
    assert _count(live.settings, ReviewDecision.undone_at.is_(None)) == 3
    with session_scope(live.settings) as session:
        decisions = list(session.scalars(select(ReviewDecision).order_by(ReviewDecision.id)))
        items = {i.id: i for i in session.scalars(select(ReviewItem))}
        for decision in decisions:
            assert decision.sense_id == gold_for_document(items[decision.item_id].document_id)
            assert decision.evidence_id is not None
        changed = [i for i in before if abs(items[i].confidence - before[i]) > 1e-4]
        assert changed, "the queue was not re-scored"
    reviewed = [r for r in live.pipeline.all_results(live.batch_id) if r["status"] == "reviewed"]
    assert len(reviewed) == 3
    assert all("machine_answer" in r for r in reviewed)
    # undo with the keyboard: the last decision is taken back and its item shown again
    page.keyboard.press("u")
    page.wait_for_url(decided_pages[-1].split("?")[0] + "*")
    assert _count(live.settings, ReviewDecision.undone_at.is_(None)) == 2
    assert _count(live.settings, ReviewDecision.undone_at.is_not(None)) == 1
    # the item page now shows the nearest labeled evidence; the figures page draws its plots
    assert page.locator(".nearest mark.occurrence").count() >= 1
    page.screenshot(path=str(SHOTS / "item-with-evidence.png"), full_page=True)
    page.goto(f"{live.base}/review/quality")
    assert page.locator("svg.chart").count() == 2
    page.screenshot(path=str(SHOTS / "quality.png"), full_page=True)
    page.context.close()


def test_twenty_decisions_page_latency(browser: Any, live: Live) -> None:
    page = sign_in(browser, live, live.pipeline.keys["review"])
    page.get_by_role("button", name="Start reviewing").click()
    page.wait_for_url("**/review/items/*")
    timings = []
    for _ in range(20):
        if "/review/items/" not in page.url:
            break
        timings.append(decide_by_keyboard(page))
    assert len(timings) == 20, f"only {len(timings)} items could be decided"
    ordered = sorted(timings)
    p95 = ordered[min(len(ordered) - 1, round(0.95 * len(ordered)) - 1)]
    print(
        f"\n20 keyboard decisions: median {statistics.median(timings) * 1000:.0f} ms, "
        f"p95 {p95 * 1000:.0f} ms, total {sum(timings):.1f} s"
    )
    assert _count(live.settings, ReviewDecision.undone_at.is_(None)) == 20
    page.context.close()


def test_two_reviewers_get_different_items(browser: Any, live: Live, team_id: int) -> None:
    second = team_keys(live.settings, team_id)["review"]
    first_page = sign_in(browser, live, live.pipeline.keys["review"])
    second_page = sign_in(browser, live, second)
    for page in (first_page, second_page):
        page.get_by_role("button", name="Start reviewing").click()
        page.wait_for_url("**/review/items/*")
    assert first_page.url.split("?")[0] != second_page.url.split("?")[0]
    first_page.context.close()
    second_page.context.close()


HOSTILE = (
    '<script>window.__owned = 1</script> Our bass <img src=x onerror="window.__owned=2"> '
    'tank <a href="javascript:window.__owned=3">bass</a> & <b>bold</b> "quotes"'
)


def test_hostile_document_text_shows_as_text(browser: Any, live: Live) -> None:
    response = live.pipeline.client.post(
        "/v1/batches",
        json={
            "inventory": "tiny-shop",
            "documents": [{"id": "hostile", "text": HOSTILE}],
            "options": {"rationale": True},
        },
        headers=bearer(live.pipeline.keys["ingest"]),
    )
    assert response.status_code == 202
    hostile_batch = response.json()["id"]
    live.pipeline.worker().run_until_idle()
    page = sign_in(browser, live, live.pipeline.keys["review"])
    dialogs: list[str] = []
    page.on("dialog", lambda dialog: (dialogs.append(dialog.message), dialog.dismiss()))
    page.goto(f"{live.base}/review?batch={hostile_batch}")
    page.get_by_role("button", name="Start reviewing").click()
    page.wait_for_url("**/review/items/*")
    document = page.locator("#context-attention .document")
    assert "<script>window.__owned = 1</script>" in document.inner_text()
    assert 'href="javascript:' in document.inner_text()
    assert document.locator("script, img, a, b").count() == 0
    assert page.evaluate("typeof window.__owned") == "undefined"
    assert dialogs == []
    page.screenshot(path=str(SHOTS / "item-hostile.png"), full_page=True)
    page.context.close()


def test_post_without_csrf_token_is_refused(browser: Any, live: Live) -> None:
    page = sign_in(browser, live, live.pipeline.keys["review"])
    page.get_by_role("button", name="Start reviewing").click()
    page.wait_for_url("**/review/items/*")
    item_id = page.url.split("/review/items/")[1].split("?")[0]
    form = page.locator("#decide-form")
    sense = form.locator("button.choose").first.get_attribute("value")
    refused = page.request.post(
        f"{live.base}/review/items/{item_id}/decide", form={"sense": sense or ""}
    )
    assert refused.status == 403
    wrong = page.request.post(
        f"{live.base}/review/items/{item_id}/decide", form={"sense": sense or "", "csrf": "x"}
    )
    assert wrong.status == 403
    assert _count(live.settings) == 0
    page.context.close()


def test_another_teams_item_is_not_found(browser: Any, live: Live) -> None:
    from service.store.teams import create_team

    mine = sign_in(browser, live, live.pipeline.keys["review"])
    mine.get_by_role("button", name="Start reviewing").click()
    mine.wait_for_url("**/review/items/*")
    url = mine.url
    with session_scope(live.settings) as session:
        other_team = create_team(session, "rivals").id
    theirs = sign_in(browser, live, team_keys(live.settings, other_team)["review"])
    response = theirs.goto(url)
    assert response is not None and response.status == 404
    mine.context.close()
    theirs.context.close()
