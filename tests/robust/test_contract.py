"""The published OpenAPI document is the contract: a schema-driven fuzzer checks every operation.

Schemathesis (https://schemathesis.readthedocs.io) generates requests from the
OpenAPI 3.1 document the app serves and checks each response against it: no
5xx, every status code and content type declared, response bodies and headers
matching their schemas, valid requests accepted and invalid ones refused. A
few derandomized cases per operation keep the run short and repeatable.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, Phase, assume, given
from hypothesis import settings as hypothesis_settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.core.failures import FailureGroup

from service.api.app import create_app
from service.config import Settings
from service.store import database
from service.store.keys import create_key
from service.store.teams import create_team
from tests.conftest import SMALL_INVENTORY, bearer

CASES_PER_OPERATION = 2


@pytest.fixture
def contract_app(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[dict[str, Any]]:
    """An app on a fresh SQLite database holding the small inventory, and an admin key."""
    url = f"sqlite:///{tmp_path / 'contract.db'}"
    database.upgrade(url)
    settings = Settings(
        database_url=url, cache_dir=tmp_path / "cache", max_request_bytes=200_000
    )
    with database.session_scope(settings) as session:
        token = create_key(session, create_team(session, "contract").id, "admin").token
    app = create_app(settings)
    with TestClient(app, raise_server_exceptions=False) as client:
        created = client.post("/v1/inventories", json=SMALL_INVENTORY, headers=bearer(token))
        assert created.status_code == 201, created.text
        yield {"app": app, "token": token}


def _fuzz(operation: Any, mode: GenerationMode, token: str) -> list[str]:
    """Run a few cases of one operation in one mode; the failures, one line each."""
    failures: list[str] = []

    @given(case=operation.as_strategy(generation_mode=mode))
    @hypothesis_settings(
        max_examples=CASES_PER_OPERATION,
        derandomize=True,
        deadline=None,
        database=None,
        phases=[Phase.explicit, Phase.generate],
        suppress_health_check=list(HealthCheck),
    )
    def run(case: Any) -> None:
        # Out of the fuzzer's reach, each with hand-written tests: CSV and NDJSON bodies
        # (plain strings to the schema: their structure cannot be stated in it) and
        # callback URLs (accepted only if their host resolves to a public address).
        assume(case.media_type in (None, "application/json"))
        assume(not (isinstance(case.body, dict) and "callback_url" in case.body))
        try:
            case.call_and_validate(headers=bearer(token))
        except (AssertionError, FailureGroup) as exc:  # a check failed
            text = " ".join(str(exc).split())[:1500]
            failures.append(f"{operation.label} [{mode.value}] {text}")

    try:
        run()
    except Unsatisfiable:  # nothing to make invalid (an operation without parameters)
        assert mode is GenerationMode.NEGATIVE, operation.label
    return failures


def test_every_operation_keeps_its_contract(contract_app: dict[str, Any]) -> None:
    schema = schemathesis.openapi.from_asgi("/openapi.json", contract_app["app"])
    failures: list[str] = []
    operations = 0
    for result in schema.get_all_operations():
        operation = result.ok()
        operations += 1
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            failures += _fuzz(operation, mode, contract_app["token"])
    assert operations >= 25  # every route is in the document
    assert not failures, "\n".join(failures)
