"""Pydantic shapes of the inventory routes' bodies and answers (they feed OpenAPI too)."""

from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class SenseIn(Strict):
    id: str = Field(min_length=1, max_length=200, pattern=r"^\S+$")
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
    review_threshold: float | None = Field(default=None, ge=0, le=1)
    abstain_threshold: float | None = Field(default=None, ge=-1, le=1)
    temperature: float | None = Field(default=None, gt=0)


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
    updated_at: datetime


class VersionInfo(BaseModel):
    version: int
    created_at: datetime


class ExampleOut(BaseModel):
    index: int
    text: str


_OPTIONS_SCHEMA = {
    "type": "object",
    "properties": {"rationale": {"type": "boolean", "default": True}},
}


def documents_body_schema(**more_properties: dict) -> dict:
    """OpenAPI schema of a JSON body carrying an inventory name and documents."""
    return {
        "type": "object",
        "required": ["inventory", "documents"],
        "properties": {
            "inventory": {"type": "string"},
            "documents": {"type": "array", "items": {"type": "object"}},
            "options": _OPTIONS_SCHEMA,
            **more_properties,
        },
    }
