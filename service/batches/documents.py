"""Submitted documents: validated once at the door, then trusted by the worker.

A document is `{"id", "text"?, "fields"?, "metadata"?}` (see the README's Formats section). Its
size is the UTF-8 length of its text fields, which is what the engine reads;
metadata is carried as is and bounded only by the request size.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from service.engine.types import Document

MAX_ID_CHARS = 200
MAX_FIELD_NAME_CHARS = 100
ALLOWED_MEMBERS = frozenset({"id", "text", "fields", "metadata"})


class DocumentInvalid(ValueError):
    """A document breaks the format; `limit` names the setting when a size limit was hit."""

    def __init__(self, message: str, *, limit: str | None = None) -> None:
        super().__init__(message)
        self.limit = limit


@dataclass(frozen=True)
class InputDocument:
    """A validated document: ordered (field name, text) pairs, "text" first when present."""

    doc_id: str
    fields: tuple[tuple[str, str], ...]
    metadata: dict[str, Any]

    @property
    def text_bytes(self) -> int:
        return sum(len(text.encode("utf-8")) for _, text in self.fields)

    def to_engine(self) -> Document:
        return Document(doc_id=self.doc_id, fields=self.fields)

    def fields_json(self) -> list[list[str]]:
        return [[name, text] for name, text in self.fields]


def parse_document(data: Any, *, max_document_bytes: int) -> InputDocument:
    """Validate one decoded JSON value as a document; DocumentInvalid says what is wrong."""
    try:  # JSON's \uXXXX escapes can smuggle in lone surrogates, which no store accepts
        json.dumps(data, ensure_ascii=False).encode("utf-8")
    except UnicodeEncodeError as exc:
        raise DocumentInvalid(
            f"the document contains an unpaired surrogate (position {exc.start} of its JSON); "
            "text must be valid Unicode"
        ) from None
    if not isinstance(data, dict):
        raise DocumentInvalid("a document is a JSON object")
    unknown = sorted(set(data) - ALLOWED_MEMBERS)
    if unknown:
        raise DocumentInvalid(
            f"unknown member(s) {', '.join(repr(k) for k in unknown)}; "
            "a document has id, text, fields and metadata"
        )
    doc_id = data.get("id")
    if not isinstance(doc_id, str) or not doc_id.strip():
        raise DocumentInvalid("'id' must be a non-empty string")
    if len(doc_id) > MAX_ID_CHARS:
        raise DocumentInvalid(f"'id' is longer than {MAX_ID_CHARS} characters")
    fields: list[tuple[str, str]] = []
    text = data.get("text")
    if text is not None:
        if not isinstance(text, str):
            raise DocumentInvalid("'text' must be a string")
        fields.append(("text", text))
    extra = data.get("fields")
    if extra is not None:
        if not isinstance(extra, dict):
            raise DocumentInvalid("'fields' must be an object of field name to text")
        for name, value in extra.items():
            if not name or len(name) > MAX_FIELD_NAME_CHARS:
                raise DocumentInvalid(
                    f"field names must have 1 to {MAX_FIELD_NAME_CHARS} characters"
                )
            if name == "text":
                raise DocumentInvalid("the main text goes in 'text', not in 'fields'")
            if not isinstance(value, str):
                raise DocumentInvalid(f"field {name!r} must be a string")
            fields.append((name, value))
    if not fields:
        raise DocumentInvalid("a document needs 'text' or at least one entry in 'fields'")
    metadata = data.get("metadata")
    if metadata is None:
        metadata = {}
    if not isinstance(metadata, dict):
        raise DocumentInvalid("'metadata' must be an object")
    document = InputDocument(doc_id=doc_id, fields=tuple(fields), metadata=metadata)
    size = document.text_bytes
    if size > max_document_bytes:
        raise DocumentInvalid(
            f"document {doc_id!r} has {size} bytes of text; the limit is {max_document_bytes}",
            limit="max_document_bytes",
        )
    return document


def stored_document(doc_id: str, fields: list[Any]) -> Document:
    """The engine document for a stored row (fields as saved by `fields_json`)."""
    return Document(doc_id=doc_id, fields=tuple((str(n), str(t)) for n, t in fields))
