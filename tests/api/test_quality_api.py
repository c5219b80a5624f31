"""GET /v1/inventories/{name}/quality and the guarded POST .../calibrate (issue: a fit from
one label once ruined every confidence; now it is refused and nothing is stored)."""

from __future__ import annotations

import pytest

from tests.conftest import bearer

pytestmark = pytest.mark.usefixtures("encoder")


@pytest.fixture
def stored(client, api_keys, inventory_document):
    admin = bearer(api_keys["admin"])
    response = client.post("/v1/inventories", json=inventory_document, headers=admin)
    assert response.status_code == 201, response.text
    return inventory_document["name"], admin


def test_quality_reports_the_fit_and_says_when_labels_are_too_few(client, stored):
    name, admin = stored
    response = client.get(f"/v1/inventories/{name}/quality", headers=admin)
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["inventory"]["name"] == name
    review = body["review"]
    assert review["guaranteed"] is False
    assert review["threshold"] == pytest.approx(0.95)  # the conservative default
    assert 0 <= review["expected_review_share"] <= 1
    assert body["too_few_labels"] and "labeled items" in body["too_few_labels"]
    assert body["missing_sense"]["false_flag_rate"] == pytest.approx(0.05)
    assert body["labels"] == review["labels"]


def test_quality_of_an_unknown_inventory_is_404(client, api_keys):
    response = client.get("/v1/inventories/nothing-here/quality",
                          headers=bearer(api_keys["admin"]))
    assert response.status_code == 404
    assert response.headers["content-type"].startswith("application/problem+json")


def test_calibration_from_too_few_labels_is_refused_and_stores_nothing(client, stored):
    name, admin = stored
    before = client.get(f"/v1/inventories/{name}", headers=admin).json()
    dry = client.post(f"/v1/inventories/{name}/calibrate?dry_run=true", headers=admin)
    assert dry.status_code == 200, dry.text
    assert dry.json()["accepted"] is False and dry.json()["stored_version"] is None
    refused = client.post(f"/v1/inventories/{name}/calibrate", headers=admin)
    assert refused.status_code == 409
    problem = refused.json()
    assert problem["type"].endswith("calibration-refused")
    assert problem["calibration"]["accepted"] is False
    after = client.get(f"/v1/inventories/{name}", headers=admin).json()
    assert after["version"] == before["version"]


def test_calibrating_needs_the_admin_scope(client, stored, api_keys):
    name, _ = stored
    response = client.post(f"/v1/inventories/{name}/calibrate",
                           headers=bearer(api_keys["ingest"]))
    assert response.status_code == 403
