"""Parse, validate and write the inventory document (format `whichsense.inventory/1`).

Validation happens in two passes: the published JSON Schema catches shape
errors, then cross-row rules (unique terms and sense ids) that a schema cannot
express. Every problem carries a JSON Pointer so a curator finds the row.
"""

from __future__ import annotations

import json
from collections.abc import Collection
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any

from jsonschema import Draft202012Validator

from service.engine.types import (
    ABSTAIN_THRESHOLD_BOUNDS,
    REVIEW_THRESHOLD_BOUNDS,
    SENTENCE_WEIGHT_BOUNDS,
    InventorySettings,
    InventorySpec,
    SenseSpec,
    TermSpec,
)

FORMAT = "whichsense.inventory/1"


@dataclass(frozen=True)
class InventoryProblem:
    """One thing wrong with a document, located by a JSON Pointer (RFC 6901)."""

    pointer: str
    message: str

    def to_json(self) -> dict[str, str]:
        return {"pointer": self.pointer, "detail": self.message}


class InventoryInvalid(ValueError):
    """The document breaks the schema or a cross-row rule; `problems` lists each."""

    def __init__(self, problems: list[InventoryProblem]):
        self.problems = problems
        first = problems[0]
        more = f" (and {len(problems) - 1} more)" if len(problems) > 1 else ""
        super().__init__(f"{first.pointer or '/'}: {first.message}{more}")


class InventoryTooLarge(ValueError):
    """The document has more terms or senses than the configured cap; `limit` names it."""

    def __init__(self, message: str, limit: str):
        super().__init__(message)
        self.limit = limit


def check_inventory_size(data: Any, *, max_terms: int, max_senses: int) -> None:
    """Raise InventoryTooLarge past the caps (shape errors are left to validation)."""
    terms = data.get("terms") if isinstance(data, dict) else None
    if not isinstance(terms, list):
        return
    if len(terms) > max_terms:
        raise InventoryTooLarge(
            f"the inventory has {len(terms)} terms; the limit is {max_terms} "
            "(WHICHSENSE_MAX_TERMS_PER_INVENTORY)",
            "max_terms_per_inventory",
        )
    senses = sum(
        len(t["senses"]) for t in terms if isinstance(t, dict) and isinstance(t.get("senses"), list)
    )
    if senses > max_senses:
        raise InventoryTooLarge(
            f"the inventory has {senses} senses; the limit is {max_senses} "
            "(WHICHSENSE_MAX_SENSES_PER_INVENTORY)",
            "max_senses_per_inventory",
        )


@lru_cache(maxsize=1)
def inventory_schema() -> dict[str, Any]:
    """The published JSON Schema of the inventory document.

    The threshold and weight bounds are the engine's (`REVIEW_THRESHOLD_BOUNDS`,
    `ABSTAIN_THRESHOLD_BOUNDS`, `SENTENCE_WEIGHT_BOUNDS`), written in here so that they
    have one owner.
    """
    text = resources.files("service.inventory").joinpath("schema.json").read_text("utf-8")
    schema = json.loads(text)
    settings = schema["properties"]["settings"]["properties"]
    for name, (low, high) in (
        ("review_threshold", REVIEW_THRESHOLD_BOUNDS),
        ("abstain_threshold", ABSTAIN_THRESHOLD_BOUNDS),
        ("sentence_weight", SENTENCE_WEIGHT_BOUNDS),
    ):
        settings[name] = {"type": "number", "minimum": low, "maximum": high}
    return schema


def _pointer(path: Any) -> str:
    return "".join(f"/{str(part).replace('~', '~0').replace('/', '~1')}" for part in path)


def fold(surface: str) -> str:
    """The key under which two surface forms count as the same term."""
    return " ".join(surface.casefold().split())


@lru_cache(maxsize=1)
def _validators() -> tuple[Draft202012Validator, Draft202012Validator]:
    """Validators for the whole document and for one term entry (same $defs)."""
    schema = inventory_schema()
    term = {"$ref": "#/$defs/term", "$defs": schema["$defs"]}
    return Draft202012Validator(schema), Draft202012Validator(term)


def _schema_problems(
    validator: Draft202012Validator, data: Any, prefix: tuple[Any, ...] = ()
) -> list[InventoryProblem]:
    problems: list[InventoryProblem] = []
    seen: set[str] = set()
    for error in sorted(validator.iter_errors(data), key=lambda e: list(map(str, e.path))):
        pointer = _pointer((*prefix, *error.absolute_path))
        if pointer not in seen:  # one message per place is enough to fix it
            seen.add(pointer)
            problems.append(InventoryProblem(pointer, error.message))
    return problems


def validate_inventory_document(
    data: Any, *, changed_terms: Collection[int] | None = None
) -> list[InventoryProblem]:
    """Every problem in `data`, schema errors first; empty when the document is valid.

    With `changed_terms` (indexes into "terms"), only those term entries and the
    top level are checked against the schema: the rest were valid in the version
    the edit started from. Cross-row rules always cover the whole document (they
    are cheap dictionary lookups).
    """
    whole, one_term = _validators()
    if changed_terms is None or not isinstance(data, dict):
        problems = _schema_problems(whole, data)
    else:
        problems = _schema_problems(whole, {**data, "terms": []})
        terms = data.get("terms")
        if isinstance(terms, list):
            for index in sorted(changed_terms):
                problems += _schema_problems(one_term, terms[index], ("terms", index))
    if problems:
        return problems
    terms = data["terms"]
    keys = [fold(s) for term in terms for s in (term["term"], *term.get("aliases", ()))]
    ids = [sense["id"] for term in terms for sense in term["senses"]]
    if len(set(keys)) == len(keys) and len(set(ids)) == len(ids):
        return problems  # the common case, without building a pointer per row
    surfaces: dict[str, str] = {}
    sense_ids: dict[str, str] = {}
    for t, term in enumerate(terms):
        for a, surface in enumerate([term["term"], *term.get("aliases", [])]):
            where = f"/terms/{t}/term" if a == 0 else f"/terms/{t}/aliases/{a - 1}"
            key = fold(surface)
            if key in surfaces:
                problems.append(
                    InventoryProblem(where, f"'{surface}' is already used at {surfaces[key]}")
                )
            else:
                surfaces[key] = where
        for s, sense in enumerate(term["senses"]):
            where = f"/terms/{t}/senses/{s}/id"
            if sense["id"] in sense_ids:
                earlier = sense_ids[sense["id"]]
                problems.append(
                    InventoryProblem(
                        where, f"sense id '{sense['id']}' is already used at {earlier}"
                    ),
                )
            else:
                sense_ids[sense["id"]] = where
    return problems


def parse_inventory_document(
    data: Any, *, version: int | None = None, changed_terms: Collection[int] | None = None
) -> InventorySpec:
    """A valid document as an InventorySpec; raises InventoryInvalid listing every problem.

    `changed_terms`: see `validate_inventory_document`.
    """
    problems = validate_inventory_document(data, changed_terms=changed_terms)
    if problems:
        raise InventoryInvalid(problems)
    settings = data.get("settings", {})
    defaults = InventorySettings()
    return InventorySpec(
        name=data["name"],
        version=version if version is not None else int(data.get("version", 1)),
        description=data.get("description", ""),
        settings=InventorySettings(
            review_threshold=settings.get("review_threshold", defaults.review_threshold),
            abstain_threshold=settings.get("abstain_threshold", defaults.abstain_threshold),
            temperature=settings.get("temperature"),
            target_accuracy=settings.get("target_accuracy", defaults.target_accuracy),
            target_delta=settings.get("target_delta", defaults.target_delta),
            missing_sense_rate=settings.get("missing_sense_rate", defaults.missing_sense_rate),
            sentence_weight=settings.get("sentence_weight", defaults.sentence_weight),
        ),
        terms=tuple(parse_term(term) for term in data["terms"]),
    )


def parse_term(term: dict[str, Any]) -> TermSpec:
    """One schema-valid term entry as a TermSpec (surfaces normalised, glosses stripped)."""
    return TermSpec(
        term=" ".join(term["term"].split()),
        aliases=tuple(" ".join(alias.split()) for alias in term.get("aliases", [])),
        case=term.get("case", "insensitive"),
        pos=term.get("pos"),
        inflect=term.get("inflect", True),
        senses=tuple(
            SenseSpec(
                sense_id=sense["id"],
                gloss=sense["gloss"].strip(),
                examples=tuple(sense.get("examples", [])),
                tags=tuple(sense.get("tags", [])),
            )
            for sense in term["senses"]
        ),
    )


def spec_to_document(spec: InventorySpec) -> dict[str, Any]:
    """The canonical document for `spec`: every key written, so exports compare byte for byte."""
    return {
        "format": FORMAT,
        "name": spec.name,
        "description": spec.description,
        "version": spec.version,
        "settings": {
            "review_threshold": spec.settings.review_threshold,
            "abstain_threshold": spec.settings.abstain_threshold,
            "temperature": spec.settings.temperature,
            "target_accuracy": spec.settings.target_accuracy,
            "target_delta": spec.settings.target_delta,
            "missing_sense_rate": spec.settings.missing_sense_rate,
            "sentence_weight": spec.settings.sentence_weight,
        },
        "terms": [term_to_document(term) for term in spec.terms],
    }


def term_to_document(term: TermSpec) -> dict[str, Any]:
    """The canonical entry for one term (see `spec_to_document`)."""
    return {
        "term": term.term,
        "aliases": list(term.aliases),
        "case": term.case,
        "pos": term.pos,
        "inflect": term.inflect,
        "senses": [
            {
                "id": sense.sense_id,
                "gloss": sense.gloss,
                "examples": list(sense.examples),
                "tags": list(sense.tags),
            }
            for sense in term.senses
        ],
    }


def dump_document(document: dict[str, Any]) -> str:
    """The one serialisation used for files and exports (stable key order, UTF-8)."""
    return json.dumps(document, ensure_ascii=False, indent=2) + "\n"
