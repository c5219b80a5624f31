"""Hand-made hostile requests get a 4xx problem document and store nothing, on both backends.

Each case once produced a 500 (RecursionError in the JSON decoder, PostgreSQL
refusing NUL characters and integers past its `integer` range) or was taken
as JSON without saying so. Problem documents are checked against RFC 9457.
"""

from __future__ import annotations

import json

import pytest
from sqlalchemy import func, select

from service.store.database import session_scope
from service.store.models import Batch, Inventory
from tests.conftest import bearer
from tests.problem_details import assert_problem

DEEP = 10_000


def _deep(levels: int) -> str:
    return "[" * levels + "]" * levels


@pytest.fixture
def admin(client, api_keys, inventory_document):
    headers = bearer(api_keys["admin"])
    created = client.post("/v1/inventories", json=inventory_document, headers=headers)
    assert created.status_code == 201, created.text
    return headers


def _stored(settings) -> tuple[int, int]:
    with session_scope(settings) as session:
        return (
            session.scalar(select(func.count()).select_from(Batch)),
            session.scalar(select(func.count()).select_from(Inventory)),
        )


def _batch(metadata_value: str) -> str:
    """A one-document batch body whose metadata member "x" is `metadata_value`, verbatim."""
    document = f'{{"id": "a", "text": "x", "metadata": {{"x": {metadata_value}}}}}'
    return f'{{"inventory": "tiny-shop", "documents": [{document}]}}'


def _post(client, url, text, headers, media="application/json"):
    return client.post(url, content=text.encode(), headers={**headers, "Content-Type": media})


def test_deep_json_is_refused_naming_the_limit_everywhere(client, admin, settings):
    deep = _deep(DEEP)
    bodies = [
        (
            "/v1/batches",
            _batch(deep),
            "application/json",
        ),
        (
            "/v1/batches?inventory=tiny-shop",
            f'{{"id": "a", "text": "x", "metadata": {{"x": {deep}}}}}\n',
            "application/x-ndjson",
        ),
        ("/v1/inventories", deep, "application/json"),
        (
            "/v1/disambiguate",
            f'{{"inventory": "tiny-shop", "documents": {deep}}}',
            "application/json",
        ),
        ("/v1/inventories/tiny-shop/terms", f'{{"term": {deep}}}', "application/json"),
    ]
    for url, text, media in bodies:
        body = assert_problem(_post(client, url, text, admin, media), 413)
        assert body["limit"] == "max_json_depth", url
        assert str(settings.max_json_depth) in body["detail"]
    within = _deep(settings.max_json_depth - 4)  # nesting under the bound decodes as usual
    doc = _batch(within)
    assert _post(client, "/v1/batches", doc, admin).status_code == 202
    assert _stored(settings) == (1, 1)


def test_brackets_inside_strings_do_not_count_as_depth(client, admin):
    text = "[" * DEEP + " bass"
    body = {"inventory": "tiny-shop", "documents": [{"id": "a", "text": text}]}
    assert client.post("/v1/batches", json=body, headers=admin).status_code == 202


def test_nul_characters_are_refused_before_the_database(client, admin, settings):
    nul_id = {"inventory": "tiny-shop", "documents": [{"id": "a\u0000b", "text": "bass"}]}
    assert assert_problem(client.post("/v1/batches", json=nul_id, headers=admin), 422)
    line = json.dumps({"id": "a\u0000b", "text": "bass"}) + "\n"
    assert_problem(
        _post(client, "/v1/batches?inventory=tiny-shop", line, admin, "application/x-ndjson"), 422
    )
    assert_problem(client.post("/v1/disambiguate", json=nul_id, headers=admin), 422)
    term = {"term": "nul\u0000l", "senses": [{"id": "n.1", "gloss": "g"}]}
    assert_problem(client.post("/v1/inventories/tiny-shop/terms", json=term, headers=admin), 422)
    csv = "term,sense_id,gloss\r\nbass\u0000,b.1,fish\r\n"
    assert_problem(_post(client, "/v1/inventories?name=csvshop", csv, admin, "text/csv"), 422)
    assert_problem(client.get("/v1/inventories/tiny%00shop", headers=admin), 404)
    assert_problem(
        client.get("/v1/inventories/tiny-shop/document?version=1%00", headers=admin), 422
    )
    escaped = '{"inventory": "tiny-shop", "documents": [{"id": "a\\\\u0000", "text": "bass"}]}'
    assert _post(client, "/v1/batches", escaped, admin).status_code == 202  # a backslash, not NUL
    assert _stored(settings) == (1, 1)


def test_integers_past_the_database_range_are_refused(client, admin):
    huge = "99999999999999999999999"
    for url in (
        f"/v1/inventories/tiny-shop/versions/{huge}",
        f"/v1/inventories/tiny-shop/versions/{2**31}",
        f"/v1/inventories/tiny-shop/document?version={huge}",
    ):
        assert_problem(client.get(url, headers=admin), 422)
    response = client.delete(
        f"/v1/inventories/tiny-shop/senses/bass.fish/examples/{huge}", headers=admin
    )
    assert_problem(response, 422)
    assert_problem(
        client.get(f"/v1/inventories/tiny-shop/versions/{2**31 - 1}", headers=admin), 404
    )


def test_numbers_json_cannot_carry_are_refused(client, admin, settings):
    for number in ("1e400", "-1e400", "NaN", "Infinity"):
        assert_problem(_post(client, "/v1/batches", _batch(number), admin), 422)
    patch = '{"settings": {"temperature": 1e400}}'
    assert_problem(
        client.patch(
            "/v1/inventories/tiny-shop",
            content=patch,
            headers={**admin, "Content-Type": "application/json"},
        ),
        422,
    )
    assert _stored(settings) == (0, 1)


def test_a_body_without_content_type_is_415(client, admin, settings, inventory_document):
    body = json.dumps({"inventory": "tiny-shop", "documents": [{"id": "a", "text": "bass"}]})
    for method, url, text in (
        ("POST", "/v1/batches", body),
        ("POST", "/v1/inventories", json.dumps({**inventory_document, "name": "other"})),
        ("PATCH", "/v1/inventories/tiny-shop", '{"description": "x"}'),
        ("POST", "/v1/disambiguate", body),
    ):
        response = client.request(method, url, content=text.encode(), headers=admin)
        problem = assert_problem(response, 415)
        assert "application/json" in problem["accepted"]
    response = client.patch(
        "/v1/inventories/tiny-shop",
        content=b"description=x",
        headers={**admin, "Content-Type": "text/plain"},
    )
    assert_problem(response, 415)
    assert _stored(settings) == (0, 1)


def test_405_names_every_method_the_path_serves(client, admin):
    response = client.put("/v1/inventories/tiny-shop", headers=admin)
    assert_problem(response, 405)
    assert response.headers["allow"] == "DELETE, GET, PATCH"  # three routes share this path
    response = client.delete("/v1/inventories", headers=admin)
    assert response.headers["allow"] == "GET, POST"
