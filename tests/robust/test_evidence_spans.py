"""A labeled occurrence must mark an occurrence of its term, as the tagging finder sees it.

A span such as "Landed" labeled as term "bass" would be stored and pull the
sense's prototype toward an unrelated word; the API answers 422 naming the item
and the CLI exits 2, and neither stores any item of the request.
"""

from __future__ import annotations

import json

from tests.conftest import bearer
from tests.problem_details import assert_problem

TEXT = "Landed two basses off the dock, then tuned the bass guitar."


def _item(start: int, end: int, term: str = "bass", sense: str = "bass.fish") -> dict:
    return {"text": TEXT, "start": start, "end": end, "term": term, "sense": sense}


def test_a_span_that_is_not_the_term_is_refused_and_nothing_is_stored(
    client, api_keys, inventory_document
):
    admin = bearer(api_keys["admin"])
    client.post("/v1/inventories", json=inventory_document, headers=admin)
    inflected = _item(TEXT.index("basses"), TEXT.index("basses") + 6)
    alias = _item(TEXT.index("bass guitar"), TEXT.index("bass guitar") + 11, sense="bass.music")
    landed = _item(0, 6)
    partial = _item(TEXT.index("basses"), TEXT.index("basses") + 4)  # "bass" inside "basses"
    response = client.post(
        "/v1/inventories/tiny-shop/evidence",
        json={"occurrences": [inflected, landed, alias, partial]},
        headers=admin,
    )
    body = assert_problem(response, 422)
    assert [e["pointer"] for e in body["errors"]] == ["/occurrences/1", "/occurrences/3"]
    assert "'Landed'" in body["errors"][0]["detail"]
    counts = client.get("/v1/inventories/tiny-shop/evidence", headers=admin).json()
    assert counts == {"per_sense": {}, "watermark": 0}
    accepted = client.post(
        "/v1/inventories/tiny-shop/evidence",
        json={"occurrences": [inflected, alias]},
        headers=admin,
    )
    assert accepted.status_code == 201 and accepted.json() == {"added": 2}


def test_cli_import_refuses_a_file_with_a_stray_span(
    cli, settings, inventory_document, tmp_path, capsys
):
    source = tmp_path / "inventory.json"
    source.write_text(json.dumps(inventory_document), encoding="utf-8")
    assert cli(["inventory", "import", str(source)]) == 0
    labeled = tmp_path / "labeled.jsonl"
    good = {"id": "g", **_item(TEXT.index("basses"), TEXT.index("basses") + 6)}
    stray = {"id": "s", **_item(0, 6)}
    labeled.write_text(json.dumps(good) + "\n" + json.dumps(stray) + "\n", encoding="utf-8")
    capsys.readouterr()
    assert cli(["evidence", "import", str(labeled), "--inventory", "tiny-shop"]) == 2
    err = capsys.readouterr().err
    assert "item 2" in err and "'Landed'" in err
    labeled.write_text(json.dumps(good) + "\n", encoding="utf-8")
    assert cli(["evidence", "import", str(labeled), "--inventory", "tiny-shop"]) == 0
    assert "stored 1 evidence items" in capsys.readouterr().out
