"""Problem documents everywhere, API key scopes, health, metrics and offline docs."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from prometheus_client.parser import text_string_to_metric_families

from service.api.app import create_app
from service.config import Settings
from service.store.database import DatabaseNotMigrated, session_scope
from service.store.keys import create_key, revoke_key
from service.store.models import ApiKey
from tests.conftest import bearer
from tests.problem_details import assert_problem


def test_missing_and_unknown_keys_are_401_with_a_challenge(client):
    response = client.get("/v1/inventories")
    assert_problem(response, 401)
    assert response.headers["www-authenticate"] == "Bearer"
    assert_problem(client.get("/v1/inventories", headers=bearer("ws_nope_nope")), 401)
    assert_problem(client.get("/v1/inventories", headers={"Authorization": "Basic abc"}), 401)
    non_ascii = {"Authorization": "Bearer ws_abc_caf\u00e9".encode("latin-1")}
    assert_problem(client.get("/v1/inventories", headers=non_ascii), 401)


def test_wrong_scope_is_403(client, api_keys, inventory_document):
    for scope in ("ingest", "review"):
        response = client.post(
            "/v1/inventories", json=inventory_document, headers=bearer(api_keys[scope])
        )
        assert "admin" in assert_problem(response, 403)["detail"]
    ok = client.post("/v1/inventories", json=inventory_document, headers=bearer(api_keys["admin"]))
    assert ok.status_code == 201


def test_revoked_key_is_refused_and_secrets_are_stored_hashed(client, settings, team_id):
    with session_scope(settings) as session:
        issued = create_key(session, team_id, "ingest", "pipeline")
    assert client.get("/v1/inventories", headers=bearer(issued.token)).status_code == 200
    with session_scope(settings) as session:
        stored = session.query(ApiKey).filter_by(key_id=issued.key_id).one()
        secret = issued.token.split("_", 2)[2]
        assert secret not in (stored.secret_hash, stored.signing_secret)
        revoke_key(session, issued.key_id)
    assert_problem(client.get("/v1/inventories", headers=bearer(issued.token)), 401)


def test_unknown_route_and_wrong_method_are_problems(client, api_keys):
    assert_problem(client.get("/v1/nothing-here"), 404)
    body = assert_problem(client.put("/healthz"), 405)
    assert "PUT" in body["detail"]


def test_validation_error_names_fields(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    response = client.patch(
        "/v1/inventories/tiny-shop", json={"settings": {"review_threshold": "high"}}, headers=admin
    )
    body = assert_problem(response, 422)
    assert body["errors"][0]["pointer"] == "/settings/review_threshold"


def test_health_and_readiness(client):
    assert client.get("/healthz").json() == {"status": "ok"}
    ready = client.get("/readyz")
    assert ready.status_code == 200, ready.text
    assert ready.json()["checks"] == {"database": "ok", "model": "ok"}


def test_readiness_reports_a_missing_model(settings, tmp_path):
    broken = Settings(database_url=settings.database_url, model_dir=tmp_path / "absent")
    with TestClient(create_app(broken), raise_server_exceptions=False) as test_client:
        body = assert_problem(test_client.get("/readyz"), 503)
    assert "does not exist" in body["checks"]["model"]


def test_refuses_to_start_on_an_unmigrated_database(tmp_path):
    empty = Settings(database_url=f"sqlite:///{tmp_path / 'empty.db'}")
    with (
        pytest.raises(DatabaseNotMigrated, match="whichsense db upgrade"),
        TestClient(create_app(empty)),
    ):
        pass


def test_metrics_are_prometheus_text(client):
    client.get("/healthz")
    response = client.get("/metrics")
    assert response.headers["content-type"].startswith("text/plain")
    # Parsed with prometheus_client's own parser of the text exposition format.
    families = {f.name: f for f in text_string_to_metric_families(response.text)}
    samples = families["whichsense_http_requests"].samples
    assert any(s.labels["route"] == "/healthz" and s.value >= 1 for s in samples)


def test_docs_are_served_without_a_cdn(client):
    page = client.get("/docs")
    assert page.status_code == 200
    assert "/docs/assets/swagger-ui-bundle.js" in page.text
    assert "cdn" not in page.text.lower() and "https://" not in page.text
    assert client.get("/docs/assets/swagger-ui-bundle.js").status_code == 200
    spec = client.get("/openapi.json").json()
    assert "InventoryDocument" in spec["components"]["schemas"]
    assert "/v1/inventories" in spec["paths"]


def test_openapi_document_is_valid_openapi_3_1(client):
    # Reference validator: openapi-spec-validator, against the OpenAPI 3.1 specification.
    from openapi_spec_validator import validate

    spec = client.get("/openapi.json").json()
    assert spec["openapi"].startswith("3.1")
    validate(spec)
    assert {"/v1/batches", "/v1/disambiguate", "/v1/inventories/{name}/evidence"} <= set(
        spec["paths"]
    )
