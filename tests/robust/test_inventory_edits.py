"""Inventory edits are incremental, bounded in size and in how long they wait for a lock."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import select, text

from service.api.app import create_app
from service.config import Settings
from service.inventory.document import parse_inventory_document, spec_to_document
from service.store.database import engine_for, session_scope
from service.store.models import Sense, Term
from tests.conftest import bearer
from tests.problem_details import assert_problem


@pytest.fixture
def admin(client, api_keys, inventory_document):
    headers = bearer(api_keys["admin"])
    assert (
        client.post("/v1/inventories", json=inventory_document, headers=headers).status_code == 201
    )
    return headers


@contextmanager
def _app_with(
    settings: Settings, changes: dict[str, object], inventory_document, admin
) -> Iterator[TestClient]:
    """A client on an app whose settings have `changes` over the test database, holding the
    small inventory."""
    with TestClient(
        create_app(settings.model_copy(update=changes)), raise_server_exceptions=False
    ) as client:
        created = client.post("/v1/inventories", json=inventory_document, headers=admin)
        assert created.status_code == 201, created.text
        yield client


def _rows(settings) -> dict[str, tuple[int, list[str]]]:
    with session_scope(settings) as session:
        terms = session.execute(select(Term.id, Term.folded)).all()
        return {
            folded: (
                term_id,
                list(
                    session.scalars(
                        select(Sense.sense_key)
                        .where(Sense.term_id == term_id)
                        .order_by(Sense.position)
                    )
                ),
            )
            for term_id, folded in terms
        }


def test_an_edit_rewrites_only_the_touched_term(client, admin, settings):
    before = _rows(settings)
    added = client.post(
        "/v1/inventories/tiny-shop/senses/bass.fish/examples",
        json={"text": "A striped bass took the lure."},
        headers=admin,
    )
    assert added.status_code == 201 and added.json()["index"] == 1
    after = _rows(settings)
    assert after["mouse"] == before["mouse"]  # same row id: not rewritten
    assert after["bass"][0] != before["bass"][0] and after["bass"][1] == before["bass"][1]
    sense = {"id": "mouse.verb", "gloss": "to hunt for mice"}
    assert (
        client.post(
            "/v1/inventories/tiny-shop/terms/mouse/senses", json=sense, headers=admin
        ).status_code
        == 201
    )
    term = {
        "term": "Pitch",
        "aliases": ["pitches"],
        "senses": [{"id": "pitch.tar", "gloss": "  tar  "}],
    }
    assert (
        client.post("/v1/inventories/tiny-shop/terms", json=term, headers=admin).status_code == 201
    )
    assert client.delete("/v1/inventories/tiny-shop/terms/bass", headers=admin).status_code == 204
    rows = _rows(settings)
    assert set(rows) == {"mouse", "pitch"}
    assert rows["mouse"][1] == ["mouse.animal", "mouse.device", "mouse.verb"]
    document = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    assert document["version"] == 5
    # The incremental snapshot is exactly what a whole-document rewrite would store.
    assert spec_to_document(parse_inventory_document(document, version=5)) == document
    assert document["terms"][1]["senses"][0]["gloss"] == "tar"
    old = client.get("/v1/inventories/tiny-shop/versions/1", headers=admin).json()
    assert [t["term"] for t in old["terms"]] == ["bass", "mouse"]


def test_cross_row_rules_still_cover_the_whole_inventory(client, admin, settings):
    clash = {"term": "guitar", "aliases": ["Bass  Guitar"], "senses": [{"id": "g.1", "gloss": "g"}]}
    problem = assert_problem(
        client.post("/v1/inventories/tiny-shop/terms", json=clash, headers=admin), 422
    )
    assert problem["errors"][0]["pointer"] == "/terms/2/aliases/0"
    reused = {"term": "perch", "senses": [{"id": "bass.fish", "gloss": "a fish"}]}
    problem = assert_problem(
        client.post("/v1/inventories/tiny-shop/terms", json=reused, headers=admin), 422
    )
    assert "bass.fish" in problem["errors"][0]["detail"]
    moved = client.post(
        "/v1/inventories/tiny-shop/terms/mouse/senses",
        json={"id": "bass.music", "gloss": "x"},
        headers=admin,
    )
    assert_problem(moved, 422)
    assert client.get("/v1/inventories/tiny-shop", headers=admin).json()["version"] == 1
    assert set(_rows(settings)) == {"bass", "mouse"}


def test_term_and_sense_caps_are_413_naming_the_setting(
    settings, api_keys, inventory_document, monkeypatch
):
    admin = bearer(api_keys["admin"])
    changes = {"max_terms_per_inventory": 2, "max_senses_per_inventory": 5}
    with _app_with(settings, changes, inventory_document, admin) as client:
        term = {"term": "pitch", "senses": [{"id": "pitch.tar", "gloss": "tar"}]}
        problem = assert_problem(
            client.post("/v1/inventories/tiny-shop/terms", json=term, headers=admin), 413
        )
        assert problem["limit"] == "max_terms_per_inventory"
        sense = {"id": "bass.3", "gloss": "x"}
        assert (
            client.post(
                "/v1/inventories/tiny-shop/terms/bass/senses", json=sense, headers=admin
            ).status_code
            == 201
        )
        problem = assert_problem(
            client.post(
                "/v1/inventories/tiny-shop/terms/bass/senses",
                json={"id": "bass.4", "gloss": "y"},
                headers=admin,
            ),
            413,
        )
        assert problem["limit"] == "max_senses_per_inventory"
        three = {
            **inventory_document,
            "name": "three",
            "terms": [*inventory_document["terms"], term],
        }
        assert_problem(client.post("/v1/inventories", json=three, headers=admin), 413)


@pytest.mark.postgres
@pytest.mark.parametrize("database_url", ["postgres"], indirect=True)
def test_an_edit_waiting_on_a_held_lock_gives_up_with_503(
    settings, api_keys, inventory_document, monkeypatch
):
    admin = bearer(api_keys["admin"])
    changes = {"lock_timeout_seconds": 0.5}
    with _app_with(settings, changes, inventory_document, admin) as client:
        held = threading.Event()
        release = threading.Event()

        def hold_lock() -> None:
            with engine_for(settings.database_url).begin() as conn:
                conn.execute(text("SELECT id FROM inventories WHERE name = 'tiny-shop' FOR UPDATE"))
                held.set()
                release.wait(30)

        holder = threading.Thread(target=hold_lock)
        holder.start()
        try:
            assert held.wait(10)
            started = time.monotonic()
            response = client.patch(
                "/v1/inventories/tiny-shop", json={"description": "x"}, headers=admin
            )
            waited = time.monotonic() - started
        finally:
            release.set()
            holder.join()
        problem = assert_problem(response, 503)
        assert response.headers["retry-after"] == "1" and "nothing was stored" in problem["detail"]
        assert waited < 20  # gave up instead of queueing behind the lock
        after = client.patch("/v1/inventories/tiny-shop", json={"description": "x"}, headers=admin)
        assert after.status_code == 200 and after.json()["version"] == 2
