"""The one engine factory, and engine objects cached per process.

`build_disambiguator(settings, inventory, evidence)` is how every path builds
the engine users run: `whichsense tag`, `evaluate`, `calibrate`, the API and
the worker (through `EngineCache`). `load_encoder(settings)` gives the
process's encoder for the configured model directory and thread count.

The cache keeps, so no request or chunk rebuilds what it can reuse:

- one `ContextEncoder` per model directory (loading it takes seconds);
- one `OccurrenceFinder` per inventory version (it also counts occurrences at intake);
- one `Disambiguator` per (database, inventory version, evidence watermark, model).

When evidence grows, the newest engine of an inventory version is advanced in
place: only the new evidence is encoded and added to its prototypes. An engine
is advanced under its own lock, so a tag call in flight finishes on the
prototypes it started with; callers holding the old engine get `EngineRetired`
and ask again (`tag_pinned` does that). An older watermark that is no longer
cached (a batch submitted before the evidence grew) gets a fresh build, so a
batch's results always depend on exactly the evidence it was pinned to.
"""

from __future__ import annotations

import logging
import threading
from collections import OrderedDict
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.config import Settings, resolve_model_dir
from service.engine import (
    ContextEncoder,
    Disambiguator,
    Document,
    DocumentResult,
    Evidence,
    InventorySpec,
    OccurrenceFinder,
    PrototypeBook,
    open_wordnet,
)
from service.engine.types import Status
from service.store.evidence import load_evidence
from service.store.inventories import load_version_spec
from service.store.models import InventoryVersion

log = logging.getLogger(__name__)


def load_encoder(settings: Settings) -> ContextEncoder:
    """The process's encoder for `settings` (loaded once per model directory)."""
    return shared_engines().encoder(settings)


def build_disambiguator(
    settings: Settings,
    inventory: InventorySpec,
    evidence: Sequence[Evidence] = (),
    *,
    encoder: ContextEncoder | None = None,
    finder: OccurrenceFinder | None = None,
    prototypes: PrototypeBook | None = None,
    erasure_for: frozenset[Status] = frozenset(),
) -> Disambiguator:
    """The engine users run, for one inventory version and its evidence.

    Evidence naming a sense this version lacks is left out (evidence outlives
    senses a curator removed). `prototypes` continues a book built earlier for
    the same inventory version (only `evidence` is then encoded and added).
    """
    encoder = encoder if encoder is not None else load_encoder(settings)
    if finder is None:
        finder = OccurrenceFinder(inventory, open_wordnet(cache_dir=settings.cache_dir))
    known = {(spec.term, sense.sense_id) for spec in inventory.terms for sense in spec.senses}
    # Evidence goes in before the engine fits its trust settings (temperature, review
    # threshold, missing-sense model) from the labeled items, so the fit sees it.
    return Disambiguator(
        encoder,
        inventory,
        [item for item in evidence if (item.term, item.sense_id) in known],
        prototypes=prototypes,
        finder=finder,
        # The engine counts characters; a document within the byte limit is within this too.
        max_document_chars=settings.max_document_bytes,
        erasure_for=erasure_for,
    )


class EngineRetired(RuntimeError):
    """The engine was advanced to newer evidence while the caller waited; fetch it again."""


@dataclass(frozen=True)
class Pin:
    """What a result depends on: an inventory (row id: names are only unique per team)
    at a version, and the evidence up to a watermark."""

    inventory_id: int
    version: int
    watermark: int


class PinnedEngine:
    """A Disambiguator for one pin; `tag` runs one call at a time (tokenizers are not
    safe to share between threads, and two CPU-bound calls gain nothing on few cores)."""

    def __init__(self, disambiguator: Disambiguator, watermark: int) -> None:
        self.disambiguator = disambiguator
        self.watermark = watermark
        self.retired = False
        self.lock = threading.Lock()

    def tag(self, documents: Sequence[Document], *, rationale: bool) -> list[DocumentResult]:
        with self.lock:
            if self.retired:
                raise EngineRetired()
            return list(self.disambiguator.tag(documents, rationale=rationale))


# (database URL, inventory row id, inventory version, model id, document size limit): the
# row id keeps apart two teams' content-equal inventories, whose evidence differs.
_Base = tuple[str, int, InventorySpec, str, int]


class EngineCache:
    """Encoders, finders and disambiguators of this process (see the module docstring)."""

    def __init__(self, max_engines: int = 8, max_finders: int = 32) -> None:
        self.max_engines = max_engines
        self.max_finders = max_finders
        self._lock = threading.RLock()
        self._encoders: dict[tuple[Path, bool], ContextEncoder] = {}
        self._finders: OrderedDict[tuple[str, InventorySpec], OccurrenceFinder] = OrderedDict()
        self._specs: OrderedDict[tuple[Any, ...], InventorySpec] = OrderedDict()
        self._engines: OrderedDict[tuple[_Base, int], PinnedEngine] = OrderedDict()
        self.builds = 0
        self.advances = 0

    def encoder(self, settings: Settings) -> ContextEncoder:
        """The encoder `settings` ask for (model directory, threads, int8), loaded on first use."""
        model_dir = resolve_model_dir(settings)
        quantize = settings.quantize_encoder
        with self._lock:
            encoder = self._encoders.get((model_dir, quantize))
            if encoder is None:
                log.info("loading the encoder from %s", model_dir)
                encoder = ContextEncoder(
                    model_dir, num_threads=settings.torch_threads, quantize=quantize
                )
                self._encoders[(model_dir, quantize)] = encoder
            return encoder

    def spec(
        self, session: Session, database_url: str, inventory_id: int, version: int
    ) -> InventorySpec:
        """The inventory at `version`, parsed once: version snapshots never change (the
        snapshot row's id and time tell a re-created inventory apart)."""
        row = session.execute(
            select(InventoryVersion.id, InventoryVersion.created_at).where(
                InventoryVersion.inventory_id == inventory_id, InventoryVersion.version == version
            )
        ).one_or_none()
        if row is None:
            return load_version_spec(session, inventory_id, version)  # raises NotFound
        key = (database_url, inventory_id, version, row.id, row.created_at)
        with self._lock:
            cached = self._specs.get(key)
            if cached is not None:
                self._specs.move_to_end(key)
                return cached
        spec = load_version_spec(session, inventory_id, version)
        with self._lock:
            self._specs[key] = spec
            while len(self._specs) > self.max_finders:
                self._specs.popitem(last=False)
        return spec

    def finder(self, database_url: str, spec: InventorySpec) -> OccurrenceFinder:
        key = (database_url, spec)
        with self._lock:
            finder = self._finders.get(key)
            if finder is None:
                finder = OccurrenceFinder(spec)
                self._finders[key] = finder
                while len(self._finders) > self.max_finders:
                    self._finders.popitem(last=False)
            self._finders.move_to_end(key)
            return finder

    def engine(
        self, session: Session, settings: Settings, pin: Pin, spec: InventorySpec | None = None
    ) -> PinnedEngine:
        """The engine for `pin`, building or advancing one as needed (reads via `session`).
        `spec`: the pinned version's spec when the caller already has it from `spec()`."""
        if spec is None:
            spec = self.spec(session, settings.database_url, pin.inventory_id, pin.version)
        encoder = self.encoder(settings)
        base: _Base = (
            settings.database_url,
            pin.inventory_id,
            spec,
            encoder.model_id,
            settings.max_document_bytes,
        )
        with self._lock:
            cached = self._engines.get((base, pin.watermark))
            if cached is not None:
                self._engines.move_to_end((base, pin.watermark))
                return cached
            older = [
                (watermark, engine)
                for (key, watermark), engine in self._engines.items()
                if key == base and watermark < pin.watermark
            ]
            inventory_id = pin.inventory_id
            if older:
                watermark, engine = max(older, key=lambda item: item[0])
                added = load_evidence(session, inventory_id, after=watermark, until=pin.watermark)
                with engine.lock:
                    engine.retired = True
                    advanced = build_disambiguator(
                        settings,
                        spec,
                        added,
                        encoder=encoder,
                        finder=engine.disambiguator.finder,
                        prototypes=engine.disambiguator.prototypes,
                    )
                fresh = PinnedEngine(advanced, pin.watermark)
                del self._engines[(base, watermark)]
                self.advances += 1
            else:
                evidence = load_evidence(session, inventory_id, until=pin.watermark)
                fresh = PinnedEngine(
                    build_disambiguator(
                        settings,
                        spec,
                        evidence,
                        encoder=encoder,
                        finder=self.finder(settings.database_url, spec),
                    ),
                    pin.watermark,
                )
                self.builds += 1
            self._engines[(base, pin.watermark)] = fresh
            while len(self._engines) > self.max_engines:
                _, evicted = self._engines.popitem(last=False)
                evicted.retired = True
            return fresh

    def forget_database(self, database_url: str) -> None:
        """Drop everything cached from `database_url`: its rows were emptied or restored, so
        row ids and evidence watermarks may be reused for other content."""
        with self._lock:
            for key in [key for key in self._engines if key[0][0] == database_url]:
                self._engines.pop(key).retired = True
            for spec_key in [k for k in self._specs if k[0] == database_url]:
                del self._specs[spec_key]
            for finder_key in [k for k in self._finders if k[0] == database_url]:
                del self._finders[finder_key]

    def forget(self, inventory_id: int) -> None:
        """Drop every engine of inventory row `inventory_id`: evidence was taken away (a
        review undone), and prototypes only grow, so the next request must build afresh."""
        with self._lock:
            for key in [key for key in self._engines if key[0][1] == inventory_id]:
                self._engines.pop(key).retired = True


def tag_pinned(
    get_engine: Callable[[], PinnedEngine],
    documents: Sequence[Document],
    *,
    rationale: bool = True,
) -> list[DocumentResult]:
    """Tag with the engine `get_engine` returns, asking again if it was retired meanwhile."""
    for _ in range(5):
        try:
            return get_engine().tag(documents, rationale=rationale)
        except EngineRetired:
            continue
    raise EngineRetired("the engine kept being replaced; evidence is changing too fast")


@lru_cache(maxsize=1)
def shared_engines() -> EngineCache:
    """The process-wide cache (the API, the embedded worker and `whichsense worker` use it)."""
    return EngineCache()
