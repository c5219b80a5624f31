"""The demo scenario's data files are well formed and keep evidence apart from examples.

The demo inventory, documents and labeled occurrences are hand-written; these checks catch a
broken edit (bad offsets, an unknown sense, a labeled passage that copies an example sentence,
which would let an evaluation score itself on its own prototypes).
"""

from __future__ import annotations

import importlib.util
import json
import re
import sys
from collections import Counter
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from service.inventory.document import inventory_schema

REPO = Path(__file__).resolve().parent.parent
CORPUS = REPO / "demo_corpus"
KINDS = {"listing", "help", "review", "query", "qa", "email"}
IRREGULAR_PLURALS = {"mouse": {"mice"}}


def read_lines(name: str) -> list[dict[str, Any]]:
    with (CORPUS / name).open(encoding="utf-8", newline="") as handle:
        return [json.loads(line) for line in handle if line.strip()]


@pytest.fixture(scope="module")
def inventory() -> dict[str, Any]:
    return json.loads((CORPUS / "inventory.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def documents() -> list[dict[str, Any]]:
    return read_lines("documents.jsonl")


@pytest.fixture(scope="module")
def labeled() -> list[dict[str, Any]]:
    return read_lines("labeled.jsonl")


def senses_by_id(inventory: dict[str, Any]) -> dict[str, str]:
    return {sense["id"]: term["term"] for term in inventory["terms"] for sense in term["senses"]}


def examples_of(inventory: dict[str, Any]) -> list[str]:
    return [
        example
        for term in inventory["terms"]
        for sense in term["senses"]
        for example in sense["examples"]
    ]


def word_forms(word: str) -> set[str]:
    """Plain inflections: plural, possessive, past and -ing forms, doubled consonants."""
    forms = {word, word + "s", word + "es", word + "'s", word + "s'", word + "ed", word + "d",
             word + "ing"} | IRREGULAR_PLURALS.get(word, set())
    if word.endswith("y"):
        forms |= {word[:-1] + "ies", word[:-1] + "ied"}
    if word.endswith("e"):
        forms.add(word[:-1] + "ing")
    forms |= {word + word[-1] + "ed", word + word[-1] + "ing"}
    return forms


def surface_forms(term: dict[str, Any]) -> set[str]:
    """Every accepted surface of a term or alias; only the last word of a phrase inflects."""
    forms: set[str] = set()
    for base in [term["term"], *term.get("aliases", [])]:
        head, _, last = base.lower().rpartition(" ")
        forms |= {(head + " " if head else "") + form for form in word_forms(last)}
    return forms


def mentions(text: str, forms: set[str]) -> bool:
    alternatives = "|".join(re.escape(form) for form in sorted(forms, key=len, reverse=True))
    pattern = r"(?<!\w)(" + alternatives + r")(?!\w)"
    return re.search(pattern, text.lower()) is not None


def test_inventory_follows_the_published_schema(inventory: dict[str, Any]) -> None:
    jsonschema.validate(inventory, inventory_schema())
    assert inventory["format"] == "whichsense.inventory/1"
    assert inventory["settings"] == {
        "review_threshold": 0.6, "abstain_threshold": 0.15, "temperature": None,
    }


def test_inventory_terms_and_senses_are_well_shaped(inventory: dict[str, Any]) -> None:
    terms = inventory["terms"]
    assert len(terms) >= 22
    folded = [t["term"].casefold() for t in terms]
    assert len(folded) == len(set(folded)), "term strings must be unique (case-folded)"
    ids = [sense["id"] for term in terms for sense in term["senses"]]
    assert len(ids) == len(set(ids)), "sense ids must be unique across the inventory"
    for term in terms:
        assert 2 <= len(term["senses"]) <= 4, term["term"]
        for sense in term["senses"]:
            assert sense["gloss"].strip(), sense["id"]
            assert 2 <= len(sense["examples"]) <= 3, sense["id"]
            assert sense["tags"] and all(isinstance(tag, str) for tag in sense["tags"]), sense["id"]
    assert any(" " in t["term"] or any(" " in a for a in t.get("aliases", [])) for t in terms)


def test_each_example_sentence_contains_its_term(inventory: dict[str, Any]) -> None:
    missing = [
        (sense["id"], example)
        for term in inventory["terms"]
        for sense in term["senses"]
        for example in sense["examples"]
        if not mentions(example, surface_forms(term))
    ]
    assert missing == []


def test_documents_parse_with_unique_ids_and_enough_variety(
    documents: list[dict[str, Any]],
) -> None:
    assert len(documents) >= 500
    ids = [doc["id"] for doc in documents]
    assert len(ids) == len(set(ids))
    assert all(re.fullmatch(r"ll-\d{4}", doc_id) for doc_id in ids)
    for doc in documents:
        fields = doc.get("fields", {})
        assert isinstance(doc.get("text", ""), str)
        assert doc.get("text") or fields, doc["id"]
        assert all(isinstance(v, str) and v.strip() for v in fields.values()), doc["id"]
        assert doc["metadata"]["kind"] in KINDS, doc["id"]
        assert doc["metadata"]["department"], doc["id"]
    kinds = Counter(doc["metadata"]["kind"] for doc in documents)
    assert len(kinds) >= 4
    texts = [doc.get("text", "") for doc in documents]
    assert any("\r\n" in text for text in texts), "some documents keep CRLF line endings"
    assert any(re.search(r"[À-ÿ]", text) for text in texts), "some documents use accents"


def test_labeled_offsets_slice_to_the_term(
    inventory: dict[str, Any], labeled: list[dict[str, Any]],
) -> None:
    assert len(labeled) >= 300
    assert len({item["id"] for item in labeled}) == len(labeled)
    terms = {term["term"]: term for term in inventory["terms"]}
    wrong = []
    for item in labeled:
        surface = item["text"][item["start"]:item["end"]]
        if surface.lower() not in surface_forms(terms[item["term"]]):
            wrong.append((item["id"], surface, item["term"]))
    assert wrong == []


def test_labeled_senses_exist_and_cover_every_term(
    inventory: dict[str, Any], labeled: list[dict[str, Any]],
) -> None:
    owner = senses_by_id(inventory)
    assert [i["id"] for i in labeled if owner.get(i["sense"]) != i["term"]] == []
    covered = {item["term"] for item in labeled}
    assert covered == {term["term"] for term in inventory["terms"]}
    share = len({item["sense"] for item in labeled}) / len(owner)
    assert share >= 0.8, "most senses should have labeled occurrences"


def test_labeled_passages_come_from_their_documents(
    documents: list[dict[str, Any]], labeled: list[dict[str, Any]],
) -> None:
    by_id = {doc["id"]: [doc.get("text", ""), *doc.get("fields", {}).values()] for doc in documents}
    orphans = [
        item["id"] for item in labeled
        if not any(item["text"] in field for field in by_id.get(item["document_id"], []))
    ]
    assert orphans == []


def test_no_labeled_passage_or_document_repeats_an_example(
    inventory: dict[str, Any],
    documents: list[dict[str, Any]],
    labeled: list[dict[str, Any]],
) -> None:
    examples = [example.lower() for example in examples_of(inventory)]
    leaks = [item["id"] for item in labeled
             if any(example in item["text"].lower() for example in examples)]
    assert leaks == []
    bodies = [" ".join([doc.get("text", ""), *doc.get("fields", {}).values()]).lower()
              for doc in documents]
    assert [ex for ex in examples if any(ex in body for body in bodies)] == []


def test_data_files_match_the_annotated_batches(
    documents: list[dict[str, Any]], labeled: list[dict[str, Any]],
) -> None:
    """The JSON Lines files are generated; an edit to one side only is caught here."""
    spec = importlib.util.spec_from_file_location("build_corpus", CORPUS / "build_corpus.py")
    assert spec is not None and spec.loader is not None
    builder = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = builder  # dataclasses resolve annotations through sys.modules
    try:
        spec.loader.exec_module(builder)
        built = builder.assemble()
    finally:
        del sys.modules[spec.name]
    assert built.problems == []
    assert [json.loads(line) for line in built.document_lines] == documents
    assert [json.loads(line) for line in built.labeled_lines] == labeled
