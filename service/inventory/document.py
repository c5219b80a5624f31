"""Parse, validate and write the inventory document (format `whichsense.inventory/1`).

Validation happens in two passes: the published JSON Schema catches shape
errors, then cross-row rules (unique terms and sense ids) that a schema cannot
express. Every problem carries a JSON Pointer so a curator finds the row.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Any

from jsonschema import Draft202012Validator

from service.engine.types import (
    ABSTAIN_THRESHOLD_BOUNDS,
    REVIEW_THRESHOLD_BOUNDS,
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


@lru_cache(maxsize=1)
def inventory_schema() -> dict[str, Any]:
    """The published JSON Schema of the inventory document.

    The threshold bounds are the engine's (`REVIEW_THRESHOLD_BOUNDS`,
    `ABSTAIN_THRESHOLD_BOUNDS`), written in here so that they have one owner.
    """
    text = resources.files("service.inventory").joinpath("schema.json").read_text("utf-8")
    schema = json.loads(text)
    settings = schema["properties"]["settings"]["properties"]
    for name, (low, high) in (
        ("review_threshold", REVIEW_THRESHOLD_BOUNDS),
        ("abstain_threshold", ABSTAIN_THRESHOLD_BOUNDS),
    ):
        settings[name] = {"type": "number", "minimum": low, "maximum": high}
    return schema


def _pointer(path: Any) -> str:
    return "".join(f"/{str(part).replace('~', '~0').replace('/', '~1')}" for part in path)


def fold(surface: str) -> str:
    """The key under which two surface forms count as the same term."""
    return " ".join(surface.casefold().split())


def validate_inventory_document(data: Any) -> list[InventoryProblem]:
    """Every problem in `data`, schema errors first; empty when the document is valid."""
    validator = Draft202012Validator(inventory_schema())
    problems: list[InventoryProblem] = []
    seen: set[str] = set()
    for error in sorted(validator.iter_errors(data), key=lambda e: list(map(str, e.path))):
        pointer = _pointer(error.absolute_path)
        if pointer not in seen:  # one message per place is enough to fix it
            seen.add(pointer)
            problems.append(InventoryProblem(pointer, error.message))
    if problems:
        return problems
    surfaces: dict[str, str] = {}
    sense_ids: dict[str, str] = {}
    for t, term in enumerate(data["terms"]):
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


def parse_inventory_document(data: Any, *, version: int | None = None) -> InventorySpec:
    """A valid document as an InventorySpec; raises InventoryInvalid listing every problem."""
    problems = validate_inventory_document(data)
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
        ),
        terms=tuple(
            TermSpec(
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
            for term in data["terms"]
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
        },
        "terms": [
            {
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
            for term in spec.terms
        ],
    }


def dump_document(document: dict[str, Any]) -> str:
    """The one serialisation used for files and exports (stable key order, UTF-8)."""
    return json.dumps(document, ensure_ascii=False, indent=2) + "\n"
