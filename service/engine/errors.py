"""Errors the engine raises; the shell maps them to exit codes and HTTP statuses."""

from __future__ import annotations


class EngineError(Exception):
    """Base class of every error the engine raises on purpose."""


class InventoryError(EngineError, ValueError):
    """The inventory cannot be used as given (a term without senses, duplicate ids, ...)."""


class DocumentTooLarge(EngineError, ValueError):
    """A document's text exceeds the engine's size limit (the shell answers 413/422)."""

    def __init__(self, doc_id: str, size: int, limit: int) -> None:
        super().__init__(f"document {doc_id!r} has {size} characters of text; the limit is {limit}")
        self.doc_id = doc_id
        self.size = size
        self.limit = limit


class UnknownTerm(EngineError, KeyError):
    """A span was given for a term the inventory does not define."""

    def __str__(self) -> str:
        return f"term {self.args[0]!r} is not in the inventory"
