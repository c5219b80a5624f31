"""The inventory document and its CSV form: validation messages and round trips."""

from __future__ import annotations

import pytest

from service.engine.types import DEFAULT_SENTENCE_WEIGHT, SENTENCE_WEIGHT_BOUNDS
from service.inventory.csv_format import read_inventory_csv, write_inventory_csv
from service.inventory.document import (
    InventoryInvalid,
    inventory_schema,
    parse_inventory_document,
    spec_to_document,
    validate_inventory_document,
)


def test_parse_and_write_round_trip(inventory_document):
    spec = parse_inventory_document(inventory_document)
    assert spec.term("mouse").pos == "n"
    assert spec.term("bass").aliases == ("bass guitar",)
    again = parse_inventory_document(spec_to_document(spec))
    assert again == spec


def test_term_without_senses_is_refused(inventory_document):
    inventory_document["terms"][1]["senses"] = []
    with pytest.raises(InventoryInvalid) as caught:
        parse_inventory_document(inventory_document)
    assert caught.value.problems[0].pointer == "/terms/1/senses"


def test_alias_clashing_with_another_term_is_refused(inventory_document):
    inventory_document["terms"][1]["aliases"] = ["Bass"]
    problems = validate_inventory_document(inventory_document)
    assert [p.pointer for p in problems] == ["/terms/1/aliases/0"]


def test_csv_round_trip(inventory_document):
    text = write_inventory_csv(inventory_document)
    back = read_inventory_csv(text, "tiny-shop")
    assert (
        back["terms"][0]["senses"][0]["examples"]
        == (inventory_document["terms"][0]["senses"][0]["examples"])
    )
    assert (
        parse_inventory_document(back).terms == parse_inventory_document(inventory_document).terms
    )


def test_csv_errors_name_row_and_column():
    text = "term,sense_id,gloss,inflect\nbass,bass.fish,a fish,yes\nbass,bass.fish,dup,yes\n"
    with pytest.raises(InventoryInvalid) as caught:
        read_inventory_csv(text, "x")
    assert caught.value.problems[0].pointer == "row 3, column sense_id"
    with pytest.raises(InventoryInvalid) as caught:
        read_inventory_csv("term,sense_id,gloss,inflect\nbass,b.f,fish,maybe\n", "x")
    assert caught.value.problems[0].pointer == "row 2, column inflect"
    with pytest.raises(InventoryInvalid) as caught:
        read_inventory_csv("term,gloss\nbass,fish\n", "x")
    assert "sense_id" in caught.value.problems[0].message


def test_sentence_weight_round_trips_defaults_and_is_bounded(inventory_document):
    low, high = SENTENCE_WEIGHT_BOUNDS
    assert parse_inventory_document(inventory_document).settings.sentence_weight == (
        DEFAULT_SENTENCE_WEIGHT)
    inventory_document["settings"] = {"sentence_weight": 0.5}
    spec = parse_inventory_document(inventory_document)
    assert spec.settings.sentence_weight == 0.5
    assert spec_to_document(spec)["settings"]["sentence_weight"] == 0.5
    assert parse_inventory_document(spec_to_document(spec)) == spec
    assert inventory_schema()["properties"]["settings"]["properties"]["sentence_weight"] == {
        "type": "number", "minimum": low, "maximum": high}
    for bad in (low - 0.5, high + 0.5, "1", None):
        inventory_document["settings"] = {"sentence_weight": bad}
        problems = validate_inventory_document(inventory_document)
        assert [p.pointer for p in problems] == ["/settings/sentence_weight"], bad
