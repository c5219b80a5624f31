"""Batch intake: from a submitted body to stored rows in one transaction.

No HTTP here: the API hands over a `Submission` (the body as an async byte
stream, its media type, the query, how to name a batch's URL) and maps
`Refused` to problem documents. The body is read as it arrives, hashed for the
idempotency check as it goes, cut into documents that are validated, counted
(occurrences, with the inventory's finder) and inserted a group at a time. Any
problem raises before commit, so a refused submission stores nothing. Database
work runs in the thread pool: the event loop never waits on a lock.

On SQLite (one writer at a time) the whole body is read, validated and counted
before the write transaction begins, which then only inserts; should the
inventory get a new version meanwhile, the documents are counted again with
the version the batch is pinned to. Reads (the idempotency lookup, the
inventory's finder) never take the write lock.

NDJSON bodies: the inventory comes from `?inventory=` (then every line is a
document), or else the first non-blank line is a header object
`{"inventory": ..., "callback_url": ..., "options": ...}`. Documents never have
an "inventory" member, so the two cannot be confused.
"""

from __future__ import annotations

import functools
import hashlib
import json
import tempfile
from collections.abc import AsyncIterator, Callable, Sequence
from dataclasses import dataclass, field
from typing import IO, Any, TypeVar

import anyio.to_thread
from sqlalchemy.orm import Session

from service.batches.documents import DocumentInvalid, InputDocument, parse_document
from service.batches.lines import LineTooLong, numbered_lines
from service.batches.repository import DocumentSink, find_by_idempotency_key, start_batch
from service.batches.webhooks.urls import WebhookUrlRefused, check_url
from service.config import Settings
from service.engine import OccurrenceFinder
from service.json_text import loads
from service.refusal import Refused
from service.store.clock import database_now
from service.store.database import read_session_factory
from service.store.inventories import get_inventory
from service.store.models import Batch
from service.tagging.engines import shared_engines

NDJSON_TYPES = ("application/x-ndjson", "application/jsonl", "application/json-lines")
HEADER_MEMBERS = frozenset({"inventory", "callback_url", "options"})
OPTION_DEFAULTS: dict[str, Any] = {"rationale": True}
GROUP_DOCUMENTS = 200
GROUP_BYTES = 1_000_000
T = TypeVar("T")


async def run_in_threadpool(func: Callable[..., T], *args: Any) -> T:
    """Database work off the event loop, so no request waits on another's lock."""
    return await anyio.to_thread.run_sync(functools.partial(func, *args))


@dataclass(frozen=True)
class Submission:
    """What the API hands the intake: the body and the few request facts it needs."""

    body: AsyncIterator[bytes]
    media: str
    query: Sequence[tuple[str, str]]
    batch_url: Callable[[str], str]  # batch id -> its absolute URL (the webhook's links)


def _json_object(raw: bytes | bytearray, expected: str) -> dict[str, Any]:
    """`raw` as a JSON object: malformed if not UTF-8 or JSON, invalid if not an object."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise Refused(
            "malformed", f"the body is not UTF-8 (byte {exc.start})", kind="bad-encoding"
        ) from None
    try:
        data = loads(text)
    except json.JSONDecodeError as exc:
        raise Refused(
            "malformed",
            f"the body is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}",
            kind="malformed-json",
        ) from None
    if not isinstance(data, dict):
        raise Refused("invalid", f"the body must be {expected}")
    return data


def parse_options(value: Any) -> dict[str, Any]:
    """Batch options: {"rationale": bool} (default true); anything else is refused."""
    if value is None:
        return dict(OPTION_DEFAULTS)
    if not isinstance(value, dict):
        raise Refused("invalid", "'options' must be an object")
    unknown = sorted(set(value) - set(OPTION_DEFAULTS))
    if unknown:
        raise Refused("invalid", f"unknown option(s): {', '.join(unknown)}; known: rationale")
    if not isinstance(value.get("rationale", True), bool):
        raise Refused("invalid", "option 'rationale' must be true or false")
    return {**OPTION_DEFAULTS, **value}


def check_callback(url: Any, settings: Settings) -> str | None:
    """The callback URL if acceptable (resolves the host: call off the event loop)."""
    if url is None:
        return None
    if not isinstance(url, str):
        raise Refused("invalid", "'callback_url' must be a string")
    try:
        check_url(url, allow_private=settings.allow_private_webhooks)
    except WebhookUrlRefused as exc:
        raise Refused("invalid", str(exc), kind="callback-url-refused") from None
    return url


def _document_problem(exc: DocumentInvalid, where: dict[str, Any]) -> Refused:
    place = f"line {where['line']}" if "line" in where else f"document {where['index']}"
    if exc.limit is not None:
        return Refused("too_large", f"{place}: {exc}", limit=exc.limit, **where)
    return Refused("invalid", f"{place}: {exc}", kind="invalid-document", **where)


@dataclass
class Header:
    inventory: str
    callback_url: str | None = None
    options: dict[str, Any] = field(default_factory=lambda: dict(OPTION_DEFAULTS))


class IdempotencyClash(Exception):
    """Another submission with the same key was stored while this one was read."""


def check_idempotency_key(value: str | None) -> str | None:
    if value is None:
        return None
    if not 1 <= len(value) <= 200 or not value.isprintable() or not value.isascii():
        raise Refused("invalid", "Idempotency-Key must be 1 to 200 printable ASCII characters")
    return value


@dataclass(frozen=True)
class Submitted:
    """The stored batch, and whether it is an earlier submission replayed (same key, body)."""

    batch: Batch
    replayed: bool


SPOOL_IN_MEMORY = 8 * 1024 * 1024


async def _read_spool(spool: IO[bytes]) -> AsyncIterator[bytes]:
    try:
        while chunk := spool.read(64 * 1024):
            yield chunk
    finally:
        spool.close()


class Intake:
    """One submission's path into the database (see the module docstring)."""

    def __init__(
        self,
        submission: Submission,
        session: Session,
        settings: Settings,
        *,
        key_id: str,
        team_id: int,
        idempotency_key: str | None,
    ) -> None:
        self.submission = submission
        self.query = dict(submission.query)
        self.session = session
        self.settings = settings
        self.key_id = key_id
        self.team_id = team_id
        self.idempotency_key = idempotency_key
        self.media = submission.media.split(";")[0].strip().lower()
        self.digest = hashlib.sha256()
        query = sorted((k, v) for k, v in submission.query if k in HEADER_MEMBERS)
        self.digest.update(f"{self.media}\n{json.dumps(query)}\n".encode())
        self._chunks = self._hashed(submission.body)
        self._seen: dict[str, dict[str, Any]] = {}
        self._group: list[tuple[dict[str, Any], InputDocument]] = []
        self._group_bytes = 0
        self.batch: Batch | None = None
        self._sink: DocumentSink | None = None
        self._finder: OccurrenceFinder | None = None
        self._counted_with: tuple[int, int] | None = None  # the finder's (inventory, version)
        self.single_writer = self.session.get_bind().dialect.name == "sqlite"
        self._opened: tuple[Header, str | None] | None = None  # with the checked callback
        self._counted: list[tuple[dict[str, Any], InputDocument, int]] = []

    async def _hashed(self, stream: AsyncIterator[bytes]) -> AsyncIterator[bytes]:
        async for chunk in stream:
            self.digest.update(chunk)
            yield chunk

    async def spool_for_single_writer(self) -> None:
        """On SQLite, read the whole body before touching the database.

        Every SQLite write transaction takes the one write lock (BEGIN IMMEDIATE), so
        streaming a slow upload inside the transaction would stall the worker's
        claims and heartbeats for as long as the client takes. The body (at most
        `max_request_bytes`) goes to a temporary file, memory up to SPOOL_IN_MEMORY.
        """
        if not self.single_writer:
            return
        spool = tempfile.SpooledTemporaryFile(max_size=SPOOL_IN_MEMORY)  # noqa: SIM115
        async for chunk in self._chunks:
            spool.write(chunk)
        spool.seek(0)
        self._chunks = _read_spool(spool)

    async def submit(self) -> Submitted:
        """Store the submission in one transaction, or replay the earlier one with the same
        Idempotency-Key and body; Refused (nothing stored) otherwise."""
        await self.spool_for_single_writer()
        key = self.idempotency_key
        if key is not None:
            existing = await run_in_threadpool(self._earlier, key)
            if existing is not None:
                return await self._replay(existing)
        try:
            batch = await self.read()
            await run_in_threadpool(self.session.commit)
        except IdempotencyClash:
            existing = await run_in_threadpool(self._earlier, key or "")
            if existing is None:
                raise Refused(
                    "conflict", "a submission with this Idempotency-Key is in progress"
                ) from None
            return await self._replay(existing)
        except BaseException:
            await run_in_threadpool(self.session.rollback)
            raise
        return Submitted(batch, replayed=False)

    def _earlier(self, key: str) -> Batch | None:
        """The batch stored earlier under `key`, read in a read-only session (closing it
        detaches the batch with its attributes loaded)."""
        with read_session_factory(self.settings.database_url)() as session:
            return find_by_idempotency_key(session, self.team_id, self.key_id, key)

    async def _replay(self, existing: Batch) -> Submitted:
        if await self.drain() != existing.request_digest:
            raise Refused(
                "conflict",
                "this Idempotency-Key was used with a different request body",
                kind="idempotency-key-reused",
                batch_id=existing.id,
            )
        return Submitted(existing, replayed=True)

    async def drain(self) -> str:
        """Read (and hash) whatever is left of the body; the request digest."""
        async for _ in self._chunks:
            pass
        return self.digest.hexdigest()

    # -- the two body formats -----------------------------------------------------------------

    async def read(self) -> Batch:
        if self.media in NDJSON_TYPES:
            return await self._read_ndjson()
        if self.media in ("application/json", ""):
            return await self._read_json()
        raise Refused(
            "unsupported_media", f"send application/json or application/x-ndjson, not {self.media}"
        )

    async def _read_json(self) -> Batch:
        raw = bytearray()
        async for chunk in self._chunks:
            raw += chunk
        data = _json_object(raw, "an object with 'inventory' and 'documents'")
        del raw
        unknown = sorted(set(data) - HEADER_MEMBERS - {"documents"})
        if unknown:
            raise Refused("invalid", f"unknown member(s): {', '.join(unknown)}")
        documents = data.get("documents")
        if not isinstance(documents, list):
            raise Refused("invalid", "'documents' must be a list of documents")
        if not documents:
            raise Refused("invalid", "'documents' is empty; a batch needs at least one document")
        limit = self.settings.max_documents_per_batch
        if len(documents) > limit:
            raise Refused(
                "too_large",
                f"{len(documents)} documents; a batch may have at most {limit}",
                limit="max_documents_per_batch",
            )
        await self._start(self._header(data, {"pointer": "/"}, also={"documents"}))
        for index, item in enumerate(documents):
            documents[index] = None  # let parsed items go as we store them
            await self._take(item, {"index": index, "pointer": f"/documents/{index}"})
        return await self._finish()

    async def _read_ndjson(self) -> Batch:
        query = self.query
        if "inventory" in query:
            from_query = {
                "inventory": query["inventory"],
                "callback_url": query.get("callback_url"),
            }
            await self._start(self._header(from_query, {"query": True}))
        max_line = 6 * self.settings.max_document_bytes + 65_536
        try:
            async for number, line in numbered_lines(self._chunks, max_line_bytes=max_line):
                if not line.strip():
                    continue
                try:
                    item = loads(
                        line.decode("utf-8"),
                        max_depth=self.settings.max_json_depth,
                        where=f"line {number}",
                    )
                except UnicodeDecodeError as exc:
                    raise Refused(
                        "malformed",
                        f"line {number} is not UTF-8 (byte {exc.start} of the line)",
                        kind="bad-encoding",
                        line=number,
                    ) from None
                except json.JSONDecodeError as exc:
                    raise Refused(
                        "malformed",
                        f"line {number} is not valid JSON: {exc.msg} at column {exc.colno}",
                        kind="malformed-ndjson",
                        line=number,
                    ) from None
                if self._opened is None:
                    if not isinstance(item, dict) or "inventory" not in item:
                        raise Refused(
                            "invalid",
                            f"line {number}: the first line must be a header object "
                            '{"inventory": ...} unless ?inventory= is given',
                            kind="missing-header",
                            line=number,
                        )
                    await self._start(self._header(item, {"line": number}))
                    continue
                await self._take(item, {"line": number})
        except LineTooLong as exc:
            raise Refused(
                "too_large", str(exc), limit="max_document_bytes", line=exc.number
            ) from None
        if self._opened is None:
            raise Refused("invalid", "the body has no header and no documents")
        return await self._finish()

    # -- shared steps -------------------------------------------------------------------------

    def _header(
        self,
        data: dict[str, Any],
        where: dict[str, Any],
        also: frozenset[str] | set[str] = frozenset(),
    ) -> Header:
        unknown = sorted(set(data) - HEADER_MEMBERS - set(also))
        if unknown:
            raise Refused("invalid", f"unknown header member(s): {', '.join(unknown)}", **where)
        inventory = data.get("inventory")
        if not isinstance(inventory, str) or not inventory:
            raise Refused("invalid", "'inventory' must name an inventory", **where)
        return Header(
            inventory=inventory,
            callback_url=data.get("callback_url"),
            options=parse_options(data.get("options")),
        )

    async def _start(self, header: Header) -> None:
        callback = await run_in_threadpool(check_callback, header.callback_url, self.settings)
        await run_in_threadpool(self._find_finder, header.inventory)
        self._opened = (header, callback)
        if not self.single_writer:
            await run_in_threadpool(self._start_batch, header, callback)

    def _find_finder(self, inventory: str) -> None:
        """The current version's finder, found in a read-only session before any write (a
        first build loads WordNet; on SQLite the documents are counted with it before the
        write lock is taken). An unknown inventory is NotFound (404) here."""
        url = self.settings.database_url
        engines = shared_engines()
        with read_session_factory(url)() as session:
            found = get_inventory(session, self.team_id, inventory)
            spec = engines.spec(session, url, found.id, found.version)
            self._counted_with = (found.id, found.version)
            session.rollback()
        self._finder = engines.finder(url, spec)

    def _start_batch(self, header: Header, callback: str | None) -> bool:
        """Insert the batch row (the write transaction begins here); True if its pinned
        inventory version is not the one the finder was found for (the finder then
        becomes the pinned version's, and documents counted already must be recounted)."""
        from sqlalchemy.exc import IntegrityError

        try:
            self.batch = start_batch(
                self.session,
                self.team_id,
                inventory_name=header.inventory,
                submitted_by=self.key_id,
                chunk_size=self.settings.chunk_size,
                options=header.options,
                callback_url=callback,
                idempotency_key=self.idempotency_key,
                batch_url=self.submission.batch_url,
            )
        except IntegrityError:
            self.session.rollback()
            raise IdempotencyClash() from None
        self._sink = DocumentSink(self.session, self.batch)
        pinned = (self.batch.inventory_id, self.batch.inventory_version)
        if pinned == self._counted_with:
            return False
        engines = shared_engines()
        spec = engines.spec(self.session, self.settings.database_url, *pinned)
        self._finder = engines.finder(self.settings.database_url, spec)
        self._counted_with = pinned
        return True

    async def _take(self, item: Any, where: dict[str, Any]) -> None:
        try:
            document = parse_document(item, max_document_bytes=self.settings.max_document_bytes)
        except DocumentInvalid as exc:
            raise _document_problem(exc, where) from None
        first = self._seen.get(document.doc_id)
        if first is not None:
            earlier = f"line {first['line']}" if "line" in first else f"document {first['index']}"
            place = f"line {where['line']}" if "line" in where else f"document {where['index']}"
            raise Refused(
                "invalid",
                f"{place}: document id {document.doc_id!r} was already used at {earlier}",
                kind="duplicate-document-id",
                document_id=document.doc_id,
                first=first,
                **where,
            )
        limit = self.settings.max_documents_per_batch
        if len(self._seen) >= limit:
            raise Refused(
                "too_large",
                f"more than {limit} documents; a batch may have at most {limit}",
                limit="max_documents_per_batch",
                **where,
            )
        self._seen[document.doc_id] = where
        self._group.append((where, document))
        self._group_bytes += document.text_bytes
        if len(self._group) >= GROUP_DOCUMENTS or self._group_bytes >= GROUP_BYTES:
            await self._store_group()

    async def _store_group(self) -> None:
        group, self._group, self._group_bytes = self._group, [], 0
        if group:
            await run_in_threadpool(self._store, group)

    def _count(self, where: dict[str, Any], document: InputDocument) -> int:
        """The document's occurrences with the current finder (Refused over the limit)."""
        assert self._finder is not None
        limit = self.settings.max_occurrences_per_document
        occurrences = len(self._finder.find(document.to_engine()))
        if occurrences > limit:
            place = f"line {where['line']}" if "line" in where else f"document {where['index']}"
            raise Refused(
                "invalid",
                f"{place}: document {document.doc_id!r} has {occurrences} occurrences; "
                f"the limit is {limit}",
                limit="max_occurrences_per_document",
                **where,
            )
        return occurrences

    def _store(self, group: list[tuple[dict[str, Any], InputDocument]]) -> None:
        if self.single_writer:  # counted now, inserted in `_finish`'s short transaction
            self._counted.extend((where, doc, self._count(where, doc)) for where, doc in group)
            return
        assert self._sink is not None
        for where, document in group:
            self._sink.add(document, self._count(where, document))

    async def _finish(self) -> Batch:
        await self._store_group()
        if self.single_writer:
            if not self._counted:
                raise Refused("invalid", "the batch has no documents; send at least one")
            return await run_in_threadpool(self._insert_counted)
        if self._sink is None or self._sink.count == 0:
            raise Refused("invalid", "the batch has no documents; send at least one")
        digest = self.digest.hexdigest()
        sink = self._sink

        def close() -> Batch:
            return sink.close(digest, database_now(self.session))

        return await run_in_threadpool(close)

    def _insert_counted(self) -> Batch:
        """The write transaction of a single-writer database: the batch row, the documents
        counted before it began (again only if the inventory changed meanwhile), chunks.
        It ends in this same call, so the lock is never held across a wait for a thread."""
        assert self._opened is not None
        try:
            recount = self._start_batch(*self._opened)
            assert self._sink is not None
            counted, self._counted = self._counted, []
            for where, document, occurrences in counted:
                self._sink.add(document, self._count(where, document) if recount else occurrences)
            batch = self._sink.close(self.digest.hexdigest(), database_now(self.session))
            self.session.commit()
        except BaseException:
            self.session.rollback()
            raise
        return batch
