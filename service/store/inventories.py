"""Inventory repository: every edit yields a new version with an immutable snapshot.

An edit is applied to the current document. An edit that says which terms it
touched is checked incrementally: the schema for those term entries and the top
level, the cross-row rules (unique surfaces and sense ids) for the whole
document, and only the touched terms' rows are rewritten. Anything else (a
whole-document replacement) is validated and written as a whole. Either way no
edit can leave an inventory the engine would reject, and old versions stay
readable for the batches pinned to them.

Edits take the inventory's row lock; on PostgreSQL they run under
`lock_timeout` and `statement_timeout` so a stuck edit cannot hold the lock and
queue every other request behind it.
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Iterable
from typing import Any

from sqlalchemy import delete, func, select, text
from sqlalchemy.orm import Session

from service.config import Settings
from service.engine.types import InventorySettings, InventorySpec, TermSpec
from service.inventory.document import (
    InventoryInvalid,
    check_inventory_size,
    fold,
    parse_inventory_document,
    parse_term,
    spec_to_document,
    term_to_document,
    validate_inventory_document,
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
# What an edit returns: the folded surfaces of the terms it touched (added, changed or
# removed), or None when it may have changed anything (then the whole document is redone).
Change = Callable[[Document], Iterable[str] | None]


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


def _with_default_settings(document: Document, defaults: InventorySettings) -> Document:
    document = copy.deepcopy(document)
    chosen = document.setdefault("settings", {})
    chosen.setdefault("review_threshold", defaults.review_threshold)
    chosen.setdefault("abstain_threshold", defaults.abstain_threshold)
    chosen.setdefault("temperature", None)
    return document


def _add_term_rows(session: Session, inventory: Inventory, term: TermSpec, position: int) -> None:
    """Queue the rows of one term (the caller flushes: inserts go out in batches)."""
    session.add(
        Term(
            inventory_id=inventory.id,
            term=term.term,
            folded=fold(term.term),
            aliases=list(term.aliases),
            case_rule=term.case,
            pos=term.pos,
            inflect=term.inflect,
            position=position,
            senses=[
                Sense(
                    inventory_id=inventory.id,
                    sense_key=sense.sense_id,
                    gloss=sense.gloss,
                    tags=list(sense.tags),
                    position=s,
                    examples=[
                        SenseExample(text=example, position=e)
                        for e, example in enumerate(sense.examples)
                    ],
                )
                for s, sense in enumerate(term.senses)
            ],
        )
    )


def _store_version(
    session: Session, inventory: Inventory, spec: InventorySpec, document: Document | None = None
) -> None:
    """Copy the top-level settings to the inventory row and store the new snapshot.

    `document`: the canonical document when the caller has it (an incremental
    edit), else it is written from `spec`.
    """
    inventory.description = spec.description
    inventory.review_threshold = spec.settings.review_threshold
    inventory.abstain_threshold = spec.settings.abstain_threshold
    inventory.temperature = spec.settings.temperature
    inventory.updated_at = utcnow()
    session.add(
        InventoryVersion(
            inventory_id=inventory.id,
            version=spec.version,
            document=document if document is not None else spec_to_document(spec),
        )
    )
    session.flush()


def _exists(session: Session, team_id: int, name: str) -> bool:
    query = select(Inventory.id).where(Inventory.team_id == team_id, Inventory.name == name)
    return session.scalars(query).first() is not None


def _write_rows(session: Session, inventory: Inventory, spec: InventorySpec) -> None:
    """Replace the inventory's rows with those of `spec` and store its snapshot."""
    session.execute(delete(Term).where(Term.inventory_id == inventory.id))
    session.flush()
    for t, term in enumerate(spec.terms):
        _add_term_rows(session, inventory, term, t)
    _store_version(session, inventory, spec)


def _rewrite_terms(
    session: Session, inventory: Inventory, terms: list[TermSpec], keys: set[str]
) -> None:
    """Rewrite only the rows of the terms folded to `keys` (gone ones are deleted)."""
    old = {
        folded: position
        for folded, position in session.execute(
            select(Term.folded, Term.position).where(
                Term.inventory_id == inventory.id, Term.folded.in_(keys)
            )
        )
    }
    session.execute(delete(Term).where(Term.inventory_id == inventory.id, Term.folded.in_(keys)))
    session.flush()
    following: int = session.scalar(
        select(func.coalesce(func.max(Term.position), -1)).where(Term.inventory_id == inventory.id)
    ) or 0
    for term in terms:
        key = fold(term.term)
        if key not in old:
            following += 1
        _add_term_rows(session, inventory, term, old.get(key, following))


def _bound_waits(session: Session, settings: Settings | None) -> None:
    """On PostgreSQL, cap this transaction's lock wait and statement time."""
    if settings is None or session.get_bind().dialect.name != "postgresql":
        return  # SQLite: one writer, edits are short; busy_timeout bounds the wait
    lock_ms = max(1, int(settings.lock_timeout_seconds * 1000))
    statement_ms = max(1, int(settings.statement_timeout_seconds * 1000))
    session.execute(text(f"SET LOCAL lock_timeout = {lock_ms}"))
    session.execute(text(f"SET LOCAL statement_timeout = {statement_ms}"))


def _check_size(document: Document, settings: Settings | None) -> None:
    """The deployment's caps on terms and senses (callers without settings: no cap)."""
    if settings is None:
        return
    check_inventory_size(
        document,
        max_terms=settings.max_terms_per_inventory,
        max_senses=settings.max_senses_per_inventory,
    )


def create_inventory(
    session: Session,
    team_id: int,
    document: Document,
    *,
    defaults: InventorySettings,
    key_id: str | None = None,
    settings: Settings | None = None,
) -> Inventory:
    """Store a new inventory at version 1; Conflict if the team has one of that name.

    `defaults` fills the thresholds the document leaves out (the deployment's settings);
    `settings` bound its size.
    """
    _check_size(document, settings)
    spec = parse_inventory_document(_with_default_settings(document, defaults), version=1)
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
    return document  # a column read decodes a fresh object: the caller may change it


def edit_inventory(
    session: Session,
    team_id: int,
    name: str,
    change: Change,
    *,
    key_id: str | None = None,
    settings: Settings | None = None,
) -> Inventory:
    """Apply `change` to the current document in place; validate; store a new version.

    When `change` returns the folded surfaces it touched, only those terms are
    validated against the schema and have their rows rewritten. `settings` bound the
    inventory's size and, on PostgreSQL, the edit's lock wait and statement time.
    """
    _bound_waits(session, settings)
    inventory = get_inventory(session, team_id, name, for_update=True)
    document = current_document(session, inventory)
    touched = change(document)
    if document.get("name") != name:
        raise Conflict("an inventory cannot be renamed by an edit")
    _check_size(document, settings)
    version = inventory.version + 1
    if touched is None:
        spec = parse_inventory_document(document, version=version)
        inventory.version = spec.version
        _write_rows(session, inventory, spec)
        record_audit(session, team_id, key_id, "inventory.edit", name, {"version": version})
        return inventory
    # Incremental: the other terms are canonical already (they come from the snapshot).
    keys = set(touched)
    terms = document["terms"]
    changed = [i for i, entry in enumerate(terms) if fold(entry["term"]) in keys]
    problems = validate_inventory_document(document, changed_terms=changed)
    if problems:
        raise InventoryInvalid(problems)
    header = parse_inventory_document({**document, "terms": []}, version=version)
    changed_specs = [parse_term(terms[i]) for i in changed]
    for i, term_spec in zip(changed, changed_specs, strict=True):
        terms[i] = term_to_document(term_spec)
    snapshot = {**spec_to_document(header), "terms": terms}
    inventory.version = version
    _rewrite_terms(session, inventory, changed_specs, keys)
    _store_version(session, inventory, header, snapshot)
    record_audit(session, team_id, key_id, "inventory.edit", name, {"version": version})
    return inventory


def replace_inventory(
    session: Session,
    team_id: int,
    name: str,
    document: Document,
    *,
    key_id: str | None = None,
    settings: Settings | None = None,
) -> Inventory:
    """Replace the whole content of `name` with `document`, as a new version."""

    def change(current: Document) -> None:
        kept_settings = current.get("settings", {})
        current.clear()
        current.update(copy.deepcopy(document))
        current.setdefault("settings", kept_settings)

    return edit_inventory(session, team_id, name, change, key_id=key_id, settings=settings)


def import_inventory_document(
    session: Session,
    team_id: int,
    data: Document,
    *,
    defaults: InventorySettings,
    key_id: str | None = None,
    settings: Settings | None = None,
) -> Inventory:
    """Create the inventory, or replace its content as a new version if it exists."""
    name = data.get("name") if isinstance(data, dict) else None
    if isinstance(name, str) and _exists(session, team_id, name):
        return replace_inventory(session, team_id, name, data, key_id=key_id, settings=settings)
    return create_inventory(
        session, team_id, data, defaults=defaults, key_id=key_id, settings=settings
    )


def delete_inventory(
    session: Session, team_id: int, name: str, *, key_id: str | None = None
) -> None:
    inventory = get_inventory(session, team_id, name, for_update=True)
    # One statement; the database cascades to terms, senses, examples, versions and
    # batches (the ORM cascade would load every row of a large inventory first).
    session.execute(delete(Inventory).where(Inventory.id == inventory.id))
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
