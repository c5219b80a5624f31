"""Pydantic shapes of the inventory routes' bodies and answers (they feed OpenAPI too)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, PlainSerializer

from service.engine.types import (
    ABSTAIN_THRESHOLD_BOUNDS,
    REVIEW_THRESHOLD_BOUNDS,
    SENTENCE_WEIGHT_BOUNDS,
)
from service.store.clock import rfc3339

Timestamp = Annotated[datetime, PlainSerializer(rfc3339, return_type=str)]
"""A time in an answer: RFC 3339, UTC, with a `Z` (SQLite's naive times are UTC)."""


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class SenseIn(Strict):
    id: str = Field(min_length=1, max_length=200, pattern=r"^[^\s\x00\x1c-\x1f\x85\ufeff]+$")
    gloss: str = Field(min_length=1, max_length=5000)
    examples: list[str] = []
    tags: list[str] = []


class SensePatch(Strict):
    gloss: str | None = Field(default=None, min_length=1, max_length=5000)
    examples: list[str] | None = None
    tags: list[str] | None = None


class TermIn(Strict):
    term: str = Field(min_length=1, max_length=200)
    aliases: list[str] = []
    case: Literal["insensitive", "exact"] = "insensitive"
    pos: Literal["n", "v", "a", "r"] | None = None
    inflect: bool = True
    senses: list[SenseIn] = Field(min_length=1)


class TermPatch(Strict):
    aliases: list[str] | None = None
    case: Literal["insensitive", "exact"] | None = None
    pos: Literal["n", "v", "a", "r"] | None = None
    inflect: bool | None = None


class ExampleIn(Strict):
    text: str = Field(min_length=1, max_length=5000)


class SettingsPatch(Strict):
    review_threshold: float | None = Field(
        default=None, ge=REVIEW_THRESHOLD_BOUNDS[0], le=REVIEW_THRESHOLD_BOUNDS[1]
    )
    abstain_threshold: float | None = Field(
        default=None, ge=ABSTAIN_THRESHOLD_BOUNDS[0], le=ABSTAIN_THRESHOLD_BOUNDS[1]
    )
    temperature: float | None = Field(default=None, gt=0)
    target_accuracy: float | None = Field(default=None, gt=0, lt=1)
    target_delta: float | None = Field(default=None, gt=0, lt=1)
    missing_sense_rate: float | None = Field(default=None, ge=0, lt=1)
    sentence_weight: float | None = Field(
        default=None, ge=SENTENCE_WEIGHT_BOUNDS[0], le=SENTENCE_WEIGHT_BOUNDS[1]
    )


class InventoryPatch(Strict):
    description: str | None = Field(default=None, max_length=10000)
    settings: SettingsPatch | None = None


class InventorySummary(BaseModel):
    name: str
    version: int
    description: str
    terms: int
    senses: int
    settings: dict[str, float | None]
    updated_at: Timestamp


class VersionInfo(BaseModel):
    version: int
    created_at: Timestamp


class ExampleOut(BaseModel):
    index: int
    text: str


_OPTIONS_SCHEMA = {
    "type": "object",
    "properties": {"rationale": {"type": "boolean", "default": True}},
    "additionalProperties": False,
}


# A submitted document (service/batches/documents.py is the validator; this says the same).
DOCUMENT_SCHEMA: dict = {
    "type": "object",
    "description": "A document: 'text' and/or named 'fields' (at least one), free 'metadata'. "
    "Ids are unique within a request.",
    "required": ["id"],
    "additionalProperties": False,
    "properties": {
        "id": {
            "type": "string",
            "minLength": 1,
            "maxLength": 200,
            "pattern": "^[^\\x00]*[^\\s\\x00\\x1c-\\x1f\\x85\\ufeff][^\\x00]*$",
        },
        "text": {"type": "string"},
        "fields": {
            "type": "object",
            "minProperties": 1,
            "propertyNames": {
                "minLength": 1,
                "maxLength": 100,
                "pattern": "^[^\\x00]*$",
                "not": {"const": "text"},
            },
            "additionalProperties": {"type": "string"},
        },
        "metadata": {"type": "object"},
    },
    "anyOf": [{"required": ["text"]}, {"required": ["fields"]}],
}


def documents_body_schema(**more_properties: dict) -> dict:
    """OpenAPI schema of a JSON body carrying an inventory name and documents."""
    return {
        "type": "object",
        "required": ["inventory", "documents"],
        "additionalProperties": False,
        "properties": {
            "inventory": {"type": "string", "minLength": 1},
            "documents": {"type": "array", "minItems": 1, "items": DOCUMENT_SCHEMA},
            "options": _OPTIONS_SCHEMA,
            **more_properties,
        },
    }
