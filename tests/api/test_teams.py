"""Teams from the outside: two teams, the same inventory name with different senses,
batches in both; listing, purge, retention and the audit log."""

from __future__ import annotations

import copy
import json
from datetime import timedelta
from typing import Any

from sqlalchemy import func, select, update

from service.batches.cursors import encode_cursor
from service.store.clock import database_now
from service.store.database import session_scope
from service.store.keys import create_key, revoke_key
from service.store.models import Base, Batch
from service.store.teams import create_team, set_retention
from tests.conftest import SMALL_INVENTORY, bearer
from tests.pipeline import FAST
from worker.loop import Worker

# The same name, other senses: a store of musical instruments and a choir.
CHOIR = {
    "format": "whichsense.inventory/1",
    "name": "tiny-shop",
    "terms": [
        {
            "term": "bass",
            "senses": [
                {
                    "id": "bass.voice",
                    "gloss": "the lowest adult male singing voice in a choir",
                    "examples": ["The choir needs one more bass for the second row."],
                },
                {
                    "id": "bass.part",
                    "gloss": "the lowest written part of a hymn or anthem score",
                    "examples": ["Sing the bass from bar twelve, an octave down."],
                },
            ],
        }
    ],
}
DOCS = [
    {"id": "d1", "text": "He landed a bass from the dock at dawn."},
    {"id": "d2", "text": "Our bass sang the low line beautifully."},
]


def _teams(settings: Any) -> dict[str, dict[str, str]]:
    with session_scope(settings) as session:
        teams = {name: create_team(session, name).id for name in ("fishing", "choir")}
        return {
            name: {scope: create_key(session, team, scope).token for scope in ("ingest", "admin")}
            for name, team in teams.items()
        }


def _counts(settings: Any) -> dict[str, int]:
    with session_scope(settings) as session:
        return {
            t.name: int(session.scalar(select(func.count()).select_from(t)) or 0)
            for t in Base.metadata.sorted_tables
        }


def _results(client: Any, batch_id: str, token: str) -> list[dict[str, Any]]:
    response = client.get(f"/v1/batches/{batch_id}/results", headers=bearer(token))
    assert response.status_code == 200, response.text
    return response.json()["results"]


def test_two_teams_same_inventory_name_each_sees_only_its_own(client, settings, encoder):
    keys = _teams(settings)
    fishing, choir = keys["fishing"], keys["choir"]
    for team, document in (("fishing", SMALL_INVENTORY), ("choir", CHOIR)):
        made = client.post(
            "/v1/inventories", json=copy.deepcopy(document), headers=bearer(keys[team]["admin"])
        )
        assert made.status_code == 201, made.text  # the same name twice: unique per team only
    batches = {}
    for team in ("fishing", "choir"):
        submitted = client.post(
            "/v1/batches",
            json={"inventory": "tiny-shop", "documents": DOCS, "options": {"rationale": False}},
            headers=bearer(keys[team]["ingest"]),
        )
        assert submitted.status_code == 202, submitted.text
        batches[team] = submitted.json()["id"]
    Worker(settings, policy=FAST).run_until_idle()

    senses = {
        team: {r["sense_id"] for r in _results(client, batches[team], keys[team]["ingest"])}
        for team in batches
    }
    assert senses["fishing"] and senses["fishing"] <= {"bass.fish", "bass.music", None}
    assert senses["choir"] and senses["choir"] <= {"bass.voice", "bass.part", None}
    assert senses["choir"] - {None}  # the choir's own senses were used

    before = _counts(settings)
    theirs, token = batches["fishing"], choir["admin"]
    crossing = [
        ("GET", f"/v1/batches/{theirs}", None),
        ("GET", f"/v1/batches/{theirs}/results", None),
        ("GET", f"/v1/batches/{theirs}/summaries", None),
        ("GET", f"/v1/batches/{theirs}/failures", None),
        ("GET", f"/v1/batches/{theirs}/documents/d1/summary", None),
        ("DELETE", f"/v1/batches/{theirs}", None),
        ("DELETE", f"/v1/batches/{theirs}?purge=true", None),
    ]
    for method, path, body in crossing:
        response = client.request(method, path, json=body, headers=bearer(token))
        assert response.status_code == 404, (method, path, response.text)
        missing = client.request(
            method, path.replace(theirs, "0" * 24), json=body, headers=bearer(token)
        )
        assert missing.status_code == 404  # the same answer as for no batch at all
        assert response.json()["title"] == missing.json()["title"]
    assert _counts(settings) == before

    listed = client.get("/v1/batches", headers=bearer(token)).json()["batches"]
    assert [b["id"] for b in listed] == [batches["choir"]]
    stream = client.get(
        f"/v1/batches/{theirs}/results",
        headers={**bearer(token), "Accept": "application/x-ndjson"},
    )
    assert stream.status_code == 404
    # The fishing team still sees its own, unchanged.
    assert _results(client, theirs, fishing["ingest"])


def test_batch_listing_filters_and_pages_newest_first(
    client, settings, api_keys, inventory_document
):
    admin = bearer(api_keys["admin"])
    assert client.post("/v1/inventories", json=inventory_document, headers=admin).status_code == 201
    ids = []
    for n in range(5):
        response = client.post(
            "/v1/batches",
            json={"inventory": "tiny-shop", "documents": [{"id": f"d{n}", "text": "A bass."}]},
            headers=admin,
        )
        assert response.status_code == 202
        ids.append(response.json()["id"])
    cancelled = client.delete(f"/v1/batches/{ids[1]}", headers=admin)
    assert cancelled.json()["state"] == "cancelled"

    seen, cursor = [], None
    while True:
        params = {"limit": 2, **({"cursor": cursor} if cursor else {})}
        page = client.get("/v1/batches", params=params, headers=admin).json()
        assert len(page["batches"]) <= 2
        seen += [b["id"] for b in page["batches"]]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == ids[::-1]  # newest first, each once

    only = client.get("/v1/batches", params={"state": "cancelled"}, headers=admin).json()
    assert [b["id"] for b in only["batches"]] == [ids[1]]
    none = client.get("/v1/batches", params={"inventory": "other"}, headers=admin).json()
    assert none["batches"] == []
    third = client.get(f"/v1/batches/{ids[2]}", headers=admin).json()["timings"]["created_at"]
    after = client.get("/v1/batches", params={"created_after": third}, headers=admin).json()
    assert [b["id"] for b in after["batches"]] == ids[3:][::-1]
    assert client.get("/v1/batches", params={"state": "lost"}, headers=admin).status_code == 422
    for cursor in ("nope", encode_cursor(2**62, 1, 1), encode_cursor(1, 16**12, 0)):
        bad = client.get("/v1/batches", params={"cursor": cursor}, headers=admin)
        assert bad.status_code == 422, cursor  # not 5xx: far past year 9999, id out of range


def test_purge_now_and_by_retention_keep_counts_and_leave_audit_lines(
    client, settings, api_keys, team_id, inventory_document, encoder
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    ids = [
        client.post(
            "/v1/batches",
            json={"inventory": "tiny-shop", "documents": DOCS, "options": {"rationale": False}},
            headers=admin,
        ).json()["id"]
        for _ in range(3)
    ]
    worker = Worker(settings, policy=FAST)
    worker.run_until_idle()
    done = client.get(f"/v1/batches/{ids[0]}", headers=admin).json()
    assert done["state"] == "done" and done["counts"]["processed_occurrences"] >= 2

    purged = client.delete(f"/v1/batches/{ids[0]}?purge=true", headers=admin)
    assert purged.status_code == 200
    assert purged.json()["purged_at"] is not None
    assert purged.json()["counts"] == done["counts"]  # counts kept
    assert _results(client, ids[0], api_keys["admin"]) == []
    summaries = client.get(f"/v1/batches/{ids[0]}/summaries", headers=admin).json()
    assert summaries["summaries"] == []
    again = client.delete(f"/v1/batches/{ids[0]}?purge=true", headers=admin)
    assert again.status_code == 200 and again.json()["purged_at"] == purged.json()["purged_at"]

    # Retention: 2 days; batch 1 finished 3 days ago, batch 2 just now.
    with session_scope(settings) as session:
        set_retention(session, team_id, 2)
        old = database_now(session) - timedelta(days=3)
        session.execute(update(Batch).where(Batch.id == ids[1]).values(finished_at=old))
    assert worker.purge_expired_batches(force=True) == 1
    assert client.get(f"/v1/batches/{ids[1]}", headers=admin).json()["purged_at"] is not None
    assert client.get(f"/v1/batches/{ids[2]}", headers=admin).json()["purged_at"] is None
    assert _results(client, ids[2], api_keys["admin"])
    assert worker.purge_expired_batches(force=True) == 0

    events = client.get("/v1/audit", params={"action": "batch.purge"}, headers=admin).json()
    by_subject = {e["subject"]: e for e in events["events"]}
    assert set(by_subject) == {ids[0], ids[1]}
    assert by_subject[ids[0]]["detail"]["why"] == "request"
    assert by_subject[ids[0]]["key_id"] == api_keys["admin"].split("_")[1]
    assert by_subject[ids[1]]["detail"]["why"] == "retention"
    assert by_subject[ids[1]]["key_id"] is None
    assert by_subject[ids[0]]["detail"]["documents"] == 2


def test_audit_log_records_keys_and_inventory_edits_and_exports_json_lines(
    client, settings, api_keys, team_id, inventory_document
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    client.patch("/v1/inventories/tiny-shop", json={"description": "edited"}, headers=admin)
    labeled = {"text": "We caught a bass.", "start": 12, "end": 16, "term": "bass"}
    added = client.post(
        "/v1/inventories/tiny-shop/evidence",
        json={"occurrences": [{**labeled, "sense": "bass.fish"}]},
        headers=admin,
    )
    assert added.status_code == 201, added.text
    client.delete("/v1/inventories/tiny-shop", headers=admin)
    with session_scope(settings) as session:
        extra = create_key(session, team_id, "ingest", "night")
        revoke_key(session, extra.key_id)
        other = create_team(session, "elsewhere").id
        create_key(session, other, "admin")  # another team's line: never shown here

    pages, cursor = [], None
    while True:
        params = {"limit": 3, **({"cursor": cursor} if cursor else {})}
        page = client.get("/v1/audit", params=params, headers=admin).json()
        pages += page["events"]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    actions = [e["action"] for e in pages]
    # Newest first: the revocation, the new key, the inventory's delete, evidence, edit,
    # create, and the three keys the fixture made.
    assert actions == [
        "key.revoke",
        "key.create",
        "inventory.delete",
        "evidence.add",
        "inventory.edit",
        "inventory.create",
        "key.create",
        "key.create",
        "key.create",
    ]
    assert [e["id"] for e in pages] == sorted((e["id"] for e in pages), reverse=True)
    assert pages[3]["detail"] == {"added": 1} and pages[3]["subject"] == "tiny-shop"
    assert pages[4]["detail"] == {"version": 2} and pages[4]["subject"] == "tiny-shop"
    assert pages[4]["key_id"] == api_keys["admin"].split("_")[1]

    lines = client.get("/v1/audit", headers={**admin, "Accept": "application/x-ndjson"})
    assert lines.headers["content-type"].startswith("application/x-ndjson")
    assert [json.loads(line) for line in lines.text.splitlines()] == pages
    for scope in ("ingest", "review"):
        assert client.get("/v1/audit", headers=bearer(api_keys[scope])).status_code == 403


def test_the_same_inventory_in_two_teams_never_shares_evidence(client, settings, encoder):
    """Two teams install the same inventory document; each team's answers depend on its
    own evidence only (a cached engine of one team is never advanced for the other)."""
    keys = _teams(settings)
    for team in keys:
        made = client.post(
            "/v1/inventories",
            json=copy.deepcopy(SMALL_INVENTORY),
            headers=bearer(keys[team]["admin"]),
        )
        assert made.status_code == 201, made.text

    def similarities(team: str) -> dict[str, float]:
        response = client.post(
            "/v1/disambiguate",
            json={
                "inventory": "tiny-shop",
                "documents": [{"id": "d", "text": "I caught a bass."}],
                "options": {"rationale": False},
            },
            headers=bearer(keys[team]["ingest"]),
        )
        assert response.status_code == 200, response.text
        return {c["sense_id"]: c["similarity"] for c in response.json()["results"][0]["candidates"]}

    def label(team: str, sense: str, text: str) -> None:
        occurrence = {"text": text, "start": text.index("bass"), "end": text.index("bass") + 4}
        response = client.post(
            "/v1/inventories/tiny-shop/evidence",
            json={"occurrences": [{**occurrence, "term": "bass", "sense": sense}]},
            headers=bearer(keys[team]["admin"]),
        )
        assert response.status_code == 201, response.text

    alone = similarities("choir")  # no evidence yet
    for n in range(6):
        label("fishing", "bass.music", f"Turn up the bass on track {n}.")
    moved = similarities("fishing")
    assert moved["bass.music"] != alone["bass.music"]  # the fishing team's evidence counts
    label("choir", "bass.fish", "We caught a bass off the pier.")
    assert similarities("choir")["bass.music"] == alone["bass.music"]  # none of it here
