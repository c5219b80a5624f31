"""Inventory routes: CRUD, versions, import/export round trip, and bad input."""

from __future__ import annotations

import json

from sqlalchemy import func, select

from service.engine.types import SENTENCE_WEIGHT_BOUNDS
from service.store.database import session_scope
from service.store.models import Inventory, InventoryVersion, Sense, SenseExample, Term
from tests.conftest import bearer
from tests.problem_details import assert_problem


def _row_counts(settings) -> tuple[int, ...]:
    with session_scope(settings) as session:
        return tuple(
            session.scalar(select(func.count()).select_from(model))
            for model in (Inventory, InventoryVersion, Term, Sense, SenseExample)
        )


def test_create_read_and_list(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    created = client.post("/v1/inventories", json=inventory_document, headers=admin)
    assert created.status_code == 201, created.text
    assert created.headers["location"] == "/v1/inventories/tiny-shop"
    assert created.json()["version"] == 1
    assert created.json()["terms"] == 2 and created.json()["senses"] == 4
    listed = client.get("/v1/inventories", headers=bearer(api_keys["ingest"]))
    assert [row["name"] for row in listed.json()] == ["tiny-shop"]
    term = client.get("/v1/inventories/tiny-shop/terms/BASS", headers=admin).json()
    assert [s["id"] for s in term["senses"]] == ["bass.fish", "bass.music"]


def test_every_edit_bumps_the_version_and_old_versions_stay_readable(
    client, api_keys, inventory_document
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    edits = [
        (
            "post",
            "/v1/inventories/tiny-shop/senses/bass.fish/examples",
            {"text": "Largemouth bass bite best at dusk."},
        ),
        ("patch", "/v1/inventories/tiny-shop/senses/bass.music", {"gloss": "low-pitched sound"}),
        (
            "post",
            "/v1/inventories/tiny-shop/terms/mouse/senses",
            {"id": "mouse.shy", "gloss": "a timid person"},
        ),
        ("patch", "/v1/inventories/tiny-shop/terms/mouse", {"aliases": ["mice"]}),
        ("patch", "/v1/inventories/tiny-shop", {"settings": {"review_threshold": 0.7}}),
        ("delete", "/v1/inventories/tiny-shop/senses/mouse.shy", None),
    ]
    for number, (method, url, body) in enumerate(edits, start=2):
        response = client.request(method, url, json=body, headers=admin)
        assert response.status_code in (200, 201, 204), response.text
        summary = client.get("/v1/inventories/tiny-shop", headers=admin).json()
        assert summary["version"] == number
    versions = client.get("/v1/inventories/tiny-shop/versions", headers=admin).json()
    assert [v["version"] for v in versions] == list(range(1, len(edits) + 2))
    first = client.get("/v1/inventories/tiny-shop/versions/1", headers=admin).json()
    assert (
        first["terms"][0]["senses"][0]["examples"]
        == inventory_document["terms"][0]["senses"][0]["examples"]
    )
    current = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    assert current["settings"]["review_threshold"] == 0.7
    assert current["terms"][1]["aliases"] == ["mice"]
    assert "Largemouth bass bite best at dusk." in current["terms"][0]["senses"][0]["examples"]


def test_export_import_export_gives_identical_json(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    first = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    client.delete("/v1/inventories/tiny-shop", headers=admin)
    assert client.post("/v1/inventories", json=first, headers=admin).status_code == 201
    second = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    assert json.dumps(first, sort_keys=True) == json.dumps(second, sort_keys=True)


def test_csv_import_and_export(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    csv_text = client.get(
        "/v1/inventories/tiny-shop/document", headers={**admin, "Accept": "text/csv"}
    ).text
    assert csv_text.splitlines()[0].startswith("term,aliases,case,pos")
    created = client.post(
        "/v1/inventories?name=tiny-copy",
        content=csv_text.encode(),
        headers={**admin, "Content-Type": "text/csv"},
    )
    assert created.status_code == 201, created.text
    original = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    copied = client.get("/v1/inventories/tiny-copy/document", headers=admin).json()
    assert copied["terms"] == original["terms"]


def test_malformed_json_is_400_and_stores_nothing(client, api_keys, settings):
    before = _row_counts(settings)
    response = client.post(
        "/v1/inventories",
        content=b'{"format": "whichsense.inventory/1", "name": ',
        headers={**bearer(api_keys["admin"]), "Content-Type": "application/json"},
    )
    body = assert_problem(response, 400)
    assert "line 1" in body["detail"]
    assert _row_counts(settings) == before


def test_wrong_encoding_is_400(client, api_keys):
    response = client.post(
        "/v1/inventories",
        content='{"name": "café"}'.encode("latin-1"),
        headers={**bearer(api_keys["admin"]), "Content-Type": "application/json"},
    )
    assert "UTF-8" in assert_problem(response, 400)["detail"]


def test_wrong_types_name_the_field(client, api_keys, inventory_document, settings):
    inventory_document["terms"][1]["senses"][0]["examples"] = "not a list"
    before = _row_counts(settings)
    response = client.post(
        "/v1/inventories", json=inventory_document, headers=bearer(api_keys["admin"])
    )
    body = assert_problem(response, 422)
    assert body["errors"][0]["pointer"] == "/terms/1/senses/0/examples"
    assert _row_counts(settings) == before


def test_duplicate_sense_ids_are_refused_whole(client, api_keys, inventory_document, settings):
    inventory_document["terms"][1]["senses"][1]["id"] = "bass.fish"
    before = _row_counts(settings)
    response = client.post(
        "/v1/inventories", json=inventory_document, headers=bearer(api_keys["admin"])
    )
    body = assert_problem(response, 422)
    assert body["errors"] == [
        {
            "pointer": "/terms/1/senses/1/id",
            "detail": "sense id 'bass.fish' is already used at /terms/0/senses/0/id",
        }
    ]
    assert _row_counts(settings) == before


def test_an_edit_that_would_break_the_inventory_changes_nothing(
    client, api_keys, inventory_document
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    response = client.post(
        "/v1/inventories/tiny-shop/terms/mouse/senses",
        json={"id": "bass.fish", "gloss": "clash"},
        headers=admin,
    )
    assert_problem(response, 422)
    response = client.delete("/v1/inventories/tiny-shop/senses/mouse.animal", headers=admin)
    assert response.status_code == 204
    last = client.delete("/v1/inventories/tiny-shop/senses/mouse.device", headers=admin)
    assert_problem(last, 422)  # a term may not be left without senses
    summary = client.get("/v1/inventories/tiny-shop", headers=admin).json()
    assert summary["version"] == 2 and summary["senses"] == 3


def test_unknown_inventory_term_and_sense_are_404(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    assert_problem(client.get("/v1/inventories/nope", headers=admin), 404)
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    assert_problem(client.get("/v1/inventories/tiny-shop/terms/trout", headers=admin), 404)
    assert_problem(client.get("/v1/inventories/tiny-shop/senses/x.y", headers=admin), 404)
    assert_problem(client.get("/v1/inventories/tiny-shop/versions/9", headers=admin), 404)
    assert_problem(
        client.delete("/v1/inventories/tiny-shop/senses/bass.fish/examples/7", headers=admin), 404
    )


def test_duplicate_inventory_name_is_409(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    assert_problem(client.post("/v1/inventories", json=inventory_document, headers=admin), 409)


def test_oversize_body_is_413_and_stores_nothing(client, api_keys, inventory_document, settings):
    inventory_document["description"] = "x" * (settings.max_request_bytes + 10)
    before = _row_counts(settings)
    response = client.post(
        "/v1/inventories", json=inventory_document, headers=bearer(api_keys["admin"])
    )
    body = assert_problem(response, 413)
    assert body["limit"] == "max_request_bytes"
    assert _row_counts(settings) == before


def test_streamed_oversize_body_without_length_is_413(client, api_keys, settings):
    def chunks():
        for _ in range(30):
            yield b" " * 10_000

    before = _row_counts(settings)
    response = client.post(
        "/v1/inventories",
        content=chunks(),
        headers={**bearer(api_keys["admin"]), "Content-Type": "application/json"},
    )
    assert assert_problem(response, 413)["limit"] == "max_request_bytes"
    assert _row_counts(settings) == before


def test_published_schema_is_valid_json_schema(client, api_keys, inventory_document):
    from jsonschema import Draft202012Validator  # general-purpose reference validator

    schema = client.get("/v1/schemas/inventory", headers=bearer(api_keys["ingest"])).json()
    Draft202012Validator.check_schema(schema)
    Draft202012Validator(schema).validate(inventory_document)
    inventory_document["terms"][0]["case"] = "sometimes"
    assert list(Draft202012Validator(schema).iter_errors(inventory_document))


def test_evidence_is_added_whole_or_not_at_all(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    good = {
        "text": "Caught a bass at dawn.",
        "start": 9,
        "end": 13,
        "term": "bass",
        "sense": "bass.fish",
    }
    bad = {**good, "sense": "bass.nonexistent"}
    response = client.post(
        "/v1/inventories/tiny-shop/evidence", json={"occurrences": [good, bad]}, headers=admin
    )
    body = assert_problem(response, 422)
    assert body["errors"] == [
        {"pointer": "/occurrences/1/sense", "detail": "'bass.nonexistent' is not a sense of 'bass'"}
    ]
    counts = client.get("/v1/inventories/tiny-shop/evidence", headers=admin).json()
    assert counts == {"per_sense": {}, "watermark": 0}
    out_of_range = {**good, "end": 99}
    assert_problem(
        client.post(
            "/v1/inventories/tiny-shop/evidence",
            json={"occurrences": [out_of_range]},
            headers=admin,
        ),
        422,
    )
    response = client.post(
        "/v1/inventories/tiny-shop/evidence", json={"occurrences": [good, good]}, headers=admin
    )
    assert response.json() == {"added": 2}
    counts = client.get("/v1/inventories/tiny-shop/evidence", headers=admin).json()
    assert counts["per_sense"] == {"bass.fish": 2} and counts["watermark"] >= 2


def test_sentence_weight_is_patched_within_its_bounds_and_refused_outside(
    client, api_keys, inventory_document, settings
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    patched = client.patch(
        "/v1/inventories/tiny-shop", json={"settings": {"sentence_weight": 0.5}}, headers=admin
    )
    assert patched.status_code == 200, patched.text
    document = client.get("/v1/inventories/tiny-shop/document", headers=admin).json()
    assert document["settings"]["sentence_weight"] == 0.5
    before = _row_counts(settings)
    high = SENTENCE_WEIGHT_BOUNDS[1]
    for bad in (-1, high + 1, "strong"):
        response = client.patch(
            "/v1/inventories/tiny-shop", json={"settings": {"sentence_weight": bad}},
            headers=admin,
        )
        assert_problem(response, 422)
    inventory_document["name"] = "tiny-heavy"
    inventory_document["settings"] = {"sentence_weight": high + 1}
    assert_problem(client.post("/v1/inventories", json=inventory_document, headers=admin), 422)
    assert _row_counts(settings) == before
