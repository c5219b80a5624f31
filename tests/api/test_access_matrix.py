"""Every route of the OpenAPI document x every scope x same team / other team / no key /
revoked key: the status each must answer, on SQLite and PostgreSQL.

The routes come from the app itself, so a route added without a line in RULES
fails `test_every_route_has_exactly_one_rule`. Adding a route = one line in RULES.

Per case the target objects (an inventory with a batch) are made afresh, so a
DELETE in one case cannot change what the next case sees. A request by another
team's key must answer 404 (or, on a collection, its own team's view) and must
change no row.
"""

from __future__ import annotations

import copy
import itertools
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pytest
from sqlalchemy import func, select

from service.batches.documents import parse_document
from service.batches.repository import DocumentSink, start_batch
from service.store.clock import database_now
from service.store.database import session_scope
from service.store.inventories import create_inventory
from service.store.keys import create_key, revoke_key
from service.store.models import Base
from service.store.teams import create_team
from tests.conftest import SMALL_INVENTORY, bearer

OWN = "own"  # on a collection another team's key sees its own team's view: the ok status

Body = Callable[["World"], Any]


@dataclass(frozen=True)
class Rule:
    """Who may call a route: `scope` None = anyone (no key needed); "any" = any live key.
    `ok`: the status for an allowed caller of the owning team; `cross`: for an allowed
    caller of another team (404, or OWN on collections); `body`: a valid JSON body."""

    scope: str | None
    ok: int | tuple[int, ...]
    cross: int | str = 404
    body: Body | None = None


def _inventory(name: str) -> dict[str, Any]:
    return {**copy.deepcopy(SMALL_INVENTORY), "name": name}


_DOC = {"id": "x1", "text": "The bass line was loud."}

# (method, path) -> Rule. One line per route.
RULES: dict[tuple[str, str], Rule] = {
    ("GET", "/healthz"): Rule(None, 200),
    ("GET", "/readyz"): Rule(None, (200, 503)),
    ("GET", "/metrics"): Rule(None, 200),
    ("GET", "/v1/schemas/inventory"): Rule(None, 200),
    ("GET", "/v1/inventories"): Rule("any", 200, OWN),
    ("POST", "/v1/inventories"): Rule("admin", 201, OWN, lambda w: _inventory(w.name + "-2")),
    ("GET", "/v1/inventories/{name}"): Rule("any", 200),
    ("PATCH", "/v1/inventories/{name}"): Rule("admin", 200, body=lambda w: {"description": "m"}),
    ("DELETE", "/v1/inventories/{name}"): Rule("admin", 204),
    ("GET", "/v1/inventories/{name}/document"): Rule("any", 200),
    ("PUT", "/v1/inventories/{name}/document"): Rule("admin", 200, body=lambda w: _inventory(w.name)),  # noqa: E501
    ("GET", "/v1/inventories/{name}/versions"): Rule("any", 200),
    ("GET", "/v1/inventories/{name}/versions/{version}"): Rule("any", 200),
    ("GET", "/v1/inventories/{name}/terms"): Rule("any", 200),
    ("POST", "/v1/inventories/{name}/terms"): Rule("admin", 201, body=lambda w: {"term": "pike", "senses": [{"id": "pike.fish", "gloss": "a long fish"}]}),  # noqa: E501
    ("GET", "/v1/inventories/{name}/terms/{term}"): Rule("any", 200),
    ("PATCH", "/v1/inventories/{name}/terms/{term}"): Rule("admin", 200, body=lambda w: {"aliases": ["basses"]}),  # noqa: E501
    ("DELETE", "/v1/inventories/{name}/terms/{term}"): Rule("admin", 204),
    ("POST", "/v1/inventories/{name}/terms/{term}/senses"): Rule("admin", 201, body=lambda w: {"id": "bass.voice", "gloss": "a low singing voice"}),  # noqa: E501
    ("GET", "/v1/inventories/{name}/senses/{sense_id}"): Rule("any", 200),
    ("PATCH", "/v1/inventories/{name}/senses/{sense_id}"): Rule("admin", 200, body=lambda w: {"gloss": "a lake fish"}),  # noqa: E501
    ("DELETE", "/v1/inventories/{name}/senses/{sense_id}"): Rule("admin", 204),
    ("GET", "/v1/inventories/{name}/senses/{sense_id}/examples"): Rule("any", 200),
    ("POST", "/v1/inventories/{name}/senses/{sense_id}/examples"): Rule("admin", 201, body=lambda w: {"text": "Bass bite at dusk."}),  # noqa: E501
    ("PUT", "/v1/inventories/{name}/senses/{sense_id}/examples/{index}"): Rule("admin", 200, body=lambda w: {"text": "Bass bite at dawn."}),  # noqa: E501
    ("DELETE", "/v1/inventories/{name}/senses/{sense_id}/examples/{index}"): Rule("admin", 204),
    ("POST", "/v1/inventories/{name}/evidence"): Rule("admin", 201, body=lambda w: {"occurrences": [{"text": "We caught a bass.", "start": 12, "end": 16, "term": "bass", "sense": "bass.fish"}]}),  # noqa: E501
    ("GET", "/v1/inventories/{name}/evidence"): Rule("any", 200),
    ("POST", "/v1/batches"): Rule("ingest", 202, body=lambda w: {"inventory": w.name, "documents": [_DOC]}),  # noqa: E501
    ("GET", "/v1/batches"): Rule("any", 200, OWN),
    ("GET", "/v1/batches/{batch_id}"): Rule("any", 200),
    ("DELETE", "/v1/batches/{batch_id}"): Rule("ingest", 200),
    ("GET", "/v1/batches/{batch_id}/results"): Rule("any", 200),
    ("GET", "/v1/batches/{batch_id}/summaries"): Rule("any", 200),
    ("GET", "/v1/batches/{batch_id}/documents/{document_id}/summary"): Rule("any", 200),
    ("GET", "/v1/batches/{batch_id}/failures"): Rule("any", 200),
    ("POST", "/v1/disambiguate"): Rule("ingest", 200, body=lambda w: {"inventory": w.name, "documents": [_DOC], "options": {"rationale": False}}),  # noqa: E501
    ("GET", "/v1/audit"): Rule("admin", 200, OWN),
    # review queue: the world's batch has no results, so it has no items (404 = none to act on)
    ("POST", "/v1/review/claims"): Rule("review", 200, OWN, lambda w: {"count": 2}),
    ("GET", "/v1/review/items/{item_id}"): Rule("review", 404),
    ("DELETE", "/v1/review/items/{item_id}/claim"): Rule("review", 404),
    ("POST", "/v1/review/items/{item_id}/decision"): Rule("review", 404, body=lambda w: {"sense_id": None}),  # noqa: E501
    ("POST", "/v1/review/undo"): Rule("review", 404),
    ("GET", "/v1/review/decisions"): Rule("review", 200, OWN),
    ("GET", "/v1/review/settings/{inventory}"): Rule("review", 200),
    ("PUT", "/v1/review/settings/{inventory}"): Rule("admin", 200, body=lambda w: {"auto_resolve": False}),  # noqa: E501
}

SCOPES = ("ingest", "review", "admin")


def grants(held: str, needed: str) -> bool:
    """The scope rule as the README states it: admin may do everything, others their own."""
    return needed == "any" or held == needed or held == "admin"


def routes_of(openapi: dict[str, Any]) -> set[tuple[str, str]]:
    methods = {"get", "post", "put", "patch", "delete"}
    return {
        (method.upper(), path)
        for path, operations in openapi["paths"].items()
        for method in operations
        if method in methods
    }


def rule_problems(openapi: dict[str, Any]) -> list[str]:
    """Routes without a rule and rules without a route."""
    served = routes_of(openapi)
    return [f"no rule for {m} {p}" for m, p in sorted(served - set(RULES))] + [
        f"rule for a route that is not served: {m} {p}" for m, p in sorted(set(RULES) - served)
    ]


@dataclass(frozen=True)
class World:
    """Objects of one team a case aims at (made fresh per case)."""

    name: str
    batch_id: str

    def params(self) -> dict[str, str]:
        return {
            "name": self.name,
            "term": "bass",
            "sense_id": "bass.fish",
            "index": "0",
            "version": "1",
            "batch_id": self.batch_id,
            "document_id": "d0",
            "item_id": "1",
            "inventory": self.name,
        }


_counter = itertools.count()


def make_world(settings: Any, team_id: int) -> World:
    name = f"inv-{next(_counter)}"
    with session_scope(settings) as session:
        create_inventory(session, team_id, _inventory(name))
        batch = start_batch(
            session,
            team_id,
            inventory_name=name,
            submitted_by="matrix",
            chunk_size=16,
            options={"rationale": False},
        )
        sink = DocumentSink(session, batch)
        sink.add(parse_document({"id": "d0", "text": "A bass."}, max_document_bytes=10_000), 1)
        sink.close(None, database_now(session))
        return World(name, batch.id)


def row_counts(settings: Any) -> dict[str, int]:
    with session_scope(settings) as session:
        return {
            table.name: int(session.scalar(select(func.count()).select_from(table)) or 0)
            for table in Base.metadata.sorted_tables
        }


def test_every_route_has_exactly_one_rule(client):
    assert rule_problems(client.get("/openapi.json").json()) == []


def test_a_new_route_without_a_rule_is_reported(client):
    """The check above cannot pass vacuously: a route it does not know is named."""
    document = client.get("/openapi.json").json()
    document["paths"]["/v1/something-new"] = {"get": {}}
    assert rule_problems(document) == ["no rule for GET /v1/something-new"]


@pytest.fixture
def callers(settings: Any) -> dict[str, tuple[int, str, str]]:
    """label -> (team id, scope, token): three scopes in teams A and B, and A's revoked key."""
    with session_scope(settings) as session:
        team_a = create_team(session, "team-a").id
        team_b = create_team(session, "team-b").id
        made = {
            f"{team}-{scope}": (tid, scope, create_key(session, tid, scope).token)
            for team, tid in (("a", team_a), ("b", team_b))
            for scope in SCOPES
        }
        revoked = create_key(session, team_a, "admin")
        revoke_key(session, revoked.key_id)
        made["a-revoked"] = (team_a, "admin", revoked.token)
    return made


def _expected(rule: Rule, label: str, scope: str, same_team: bool) -> tuple[int, ...] | str:
    ok = rule.ok if isinstance(rule.ok, tuple) else (rule.ok,)
    if rule.scope is None:
        return ok
    if label in ("none", "a-revoked"):
        return (401,)
    if not grants(scope, rule.scope):
        return (403,)
    if same_team:
        return ok
    return ok if rule.cross == OWN else (int(rule.cross),)


def test_access_matrix(client, settings, callers, encoder):
    team_a = callers["a-admin"][0]
    failures: list[str] = []
    served = routes_of(client.get("/openapi.json").json())
    cases = [*callers.items(), ("none", (team_a, "", ""))]
    for (method, path), rule in sorted(RULES.items()):
        if (method, path) not in served:
            continue  # reported by test_every_route_has_exactly_one_rule
        for label, (team, scope, token) in cases:
            world = make_world(settings, team_a)
            same_team = team == team_a
            expected = _expected(rule, label, scope, same_team)
            before = row_counts(settings) if not same_team and 404 in expected else None
            response = client.request(
                method,
                path.format(**world.params()),
                json=rule.body(world) if rule.body else None,
                headers=bearer(token) if token else {},
            )
            if response.status_code not in expected:
                failures.append(
                    f"{method} {path} as {label}: {response.status_code} not in {expected}: "
                    f"{response.text[:160]}"
                )
            if response.status_code == 401 and "bearer" not in response.headers.get(
                "www-authenticate", ""
            ).lower():
                failures.append(f"{method} {path} as {label}: 401 without a Bearer challenge")
            if not same_team and rule.scope is not None and rule.cross == OWN:
                for secret in (world.name + '"', world.batch_id):
                    if secret in response.text:
                        failures.append(f"{method} {path} as {label} shows {secret!r} of team a")
            if before is not None and row_counts(settings) != before:
                failures.append(f"{method} {path} as {label} changed rows of team a")
    assert failures == []
