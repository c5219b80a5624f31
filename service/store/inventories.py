"""Inventory repository: every edit is a whole-document change with a new version.

An edit is applied to the current document, the result is validated as a
whole (so no edit can leave an inventory the engine would reject), the rows are
rewritten and an immutable snapshot of the new version is stored. Old versions
stay readable for the batches pinned to them.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from typing import Any

from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from service.config import get_settings
from service.engine.types import InventorySpec
from service.inventory.document import (
    fold,
    parse_inventory_document,
    spec_to_document,
)
from service.store.audit import record_audit
from service.store.errors import Conflict, NotFound
from service.store.models import (
    Inventory,
    InventoryVersion,
    Sense,
    SenseExample,
    Term,
    utcnow,
)

Document = dict[str, Any]


def list_inventories(session: Session, team_id: int) -> list[Inventory]:
    return list(
        session.scalars(
            select(Inventory).where(Inventory.team_id == team_id).order_by(Inventory.name)
        )
    )


def get_inventory(
    session: Session, team_id: int, name: str, *, for_update: bool = False
) -> Inventory:
    """The team's inventory `name`; another team's is NotFound like a missing one."""
    query = select(Inventory).where(Inventory.team_id == team_id, Inventory.name == name)
    if for_update:
        query = query.with_for_update()
    inventory = session.scalars(query).one_or_none()
    if inventory is None:
        raise NotFound(f"inventory '{name}' does not exist")
    return inventory


def _with_default_settings(document: Document) -> Document:
    settings = get_settings()
    document = copy.deepcopy(document)
    chosen = document.setdefault("settings", {})
    chosen.setdefault("review_threshold", settings.review_threshold)
    chosen.setdefault("abstain_threshold", settings.abstain_threshold)
    chosen.setdefault("temperature", None)
    return document


def _write_rows(session: Session, inventory: Inventory, spec: InventorySpec) -> None:
    """Replace the inventory's rows with those of `spec` and store its snapshot."""
    session.execute(delete(Term).where(Term.inventory_id == inventory.id))
    session.flush()
    inventory.description = spec.description
    inventory.review_threshold = spec.settings.review_threshold
    inventory.abstain_threshold = spec.settings.abstain_threshold
    inventory.temperature = spec.settings.temperature
    inventory.updated_at = utcnow()
    for t, term in enumerate(spec.terms):
        term_row = Term(
            inventory_id=inventory.id,
            term=term.term,
            folded=fold(term.term),
            aliases=list(term.aliases),
            case_rule=term.case,
            pos=term.pos,
            inflect=term.inflect,
            position=t,
        )
        session.add(term_row)
        session.flush()
        for s, sense in enumerate(term.senses):
            sense_row = Sense(
                inventory_id=inventory.id,
                term_id=term_row.id,
                sense_key=sense.sense_id,
                gloss=sense.gloss,
                tags=list(sense.tags),
                position=s,
            )
            sense_row.examples = [
                SenseExample(text=text, position=e) for e, text in enumerate(sense.examples)
            ]
            session.add(sense_row)
    session.add(
        InventoryVersion(
            inventory_id=inventory.id, version=spec.version, document=spec_to_document(spec)
        )
    )
    session.flush()


def _exists(session: Session, team_id: int, name: str) -> bool:
    query = select(Inventory.id).where(Inventory.team_id == team_id, Inventory.name == name)
    return session.scalars(query).first() is not None


def create_inventory(
    session: Session, team_id: int, document: Document, *, key_id: str | None = None
) -> Inventory:
    """Store a new inventory at version 1; Conflict if the team has one of that name."""
    spec = parse_inventory_document(_with_default_settings(document), version=1)
    if _exists(session, team_id, spec.name):
        raise Conflict(f"inventory '{spec.name}' already exists")
    inventory = Inventory(
        team_id=team_id,
        name=spec.name,
        version=1,
        review_threshold=spec.settings.review_threshold,
        abstain_threshold=spec.settings.abstain_threshold,
    )
    session.add(inventory)
    session.flush()
    _write_rows(session, inventory, spec)
    record_audit(session, team_id, key_id, "inventory.create", spec.name, {"version": 1})
    return inventory


def current_document(session: Session, inventory: Inventory) -> Document:
    return version_document(session, inventory, inventory.version)


def version_document(session: Session, inventory: Inventory, version: int) -> Document:
    """The document as it stood at `version` (NotFound if there is no such version)."""
    document = session.scalars(
        select(InventoryVersion.document).where(
            InventoryVersion.inventory_id == inventory.id, InventoryVersion.version == version
        )
    ).one_or_none()
    if document is None:
        raise NotFound(f"inventory '{inventory.name}' has no version {version}")
    return copy.deepcopy(document)


def edit_inventory(
    session: Session,
    team_id: int,
    name: str,
    change: Callable[[Document], None],
    *,
    key_id: str | None = None,
) -> Inventory:
    """Apply `change` to the current document in place; validate; store a new version."""
    inventory = get_inventory(session, team_id, name, for_update=True)
    document = current_document(session, inventory)
    change(document)
    if document.get("name") != name:
        raise Conflict("an inventory cannot be renamed by an edit")
    spec = parse_inventory_document(document, version=inventory.version + 1)
    inventory.version = spec.version
    _write_rows(session, inventory, spec)
    record_audit(session, team_id, key_id, "inventory.edit", name, {"version": spec.version})
    return inventory


def replace_inventory(
    session: Session, team_id: int, name: str, document: Document, *, key_id: str | None = None
) -> Inventory:
    """Replace the whole content of `name` with `document`, as a new version."""

    def change(current: Document) -> None:
        kept_settings = current.get("settings", {})
        current.clear()
        current.update(copy.deepcopy(document))
        current.setdefault("settings", kept_settings)

    return edit_inventory(session, team_id, name, change, key_id=key_id)


def import_inventory_document(
    session: Session, team_id: int, data: Document, *, key_id: str | None = None
) -> Inventory:
    """Create the inventory, or replace its content as a new version if it exists."""
    name = data.get("name") if isinstance(data, dict) else None
    if isinstance(name, str) and _exists(session, team_id, name):
        return replace_inventory(session, team_id, name, data, key_id=key_id)
    return create_inventory(session, team_id, data, key_id=key_id)


def delete_inventory(
    session: Session, team_id: int, name: str, *, key_id: str | None = None
) -> None:
    inventory = get_inventory(session, team_id, name, for_update=True)
    session.delete(inventory)
    session.flush()
    record_audit(session, team_id, key_id, "inventory.delete", name, {})


def load_inventory_spec(
    session: Session, team_id: int, name: str, version: int | None = None
) -> InventorySpec:
    """The engine's view of an inventory at `version` (default: current)."""
    inventory = get_inventory(session, team_id, name)
    chosen = inventory.version if version is None else version
    return parse_inventory_document(version_document(session, inventory, chosen), version=chosen)


def find_term(document: Document, term: str) -> Document:
    """The term entry whose surface form (case-folded) is `term`."""
    for entry in document["terms"]:
        if fold(entry["term"]) == fold(term):
            return entry
    raise NotFound(f"term '{term}' is not in inventory '{document['name']}'")


def find_sense(document: Document, sense_id: str) -> tuple[Document, Document]:
    """The (term entry, sense entry) holding `sense_id`."""
    for entry in document["terms"]:
        for sense in entry["senses"]:
            if sense["id"] == sense_id:
                return entry, sense
    raise NotFound(f"sense '{sense_id}' is not in inventory '{document['name']}'")


def load_version_spec(session: Session, inventory_id: int, version: int) -> InventorySpec:
    """The engine's view of inventory row `inventory_id` at `version` (a batch's pin)."""
    inventory = session.get(Inventory, inventory_id)
    if inventory is None:
        raise NotFound(f"inventory {inventory_id} does not exist")
    return parse_inventory_document(version_document(session, inventory, version), version=version)
