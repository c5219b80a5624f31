"""Engine objects cached per process, so no request or chunk rebuilds what it can reuse.

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
    InventorySpec,
    OccurrenceFinder,
)
from service.store.evidence import load_evidence
from service.store.inventories import get_inventory, load_inventory_spec
from service.store.models import Inventory, InventoryVersion

log = logging.getLogger(__name__)


class EngineRetired(RuntimeError):
    """The engine was advanced to newer evidence while the caller waited; fetch it again."""


@dataclass(frozen=True)
class Pin:
    """What a result depends on: an inventory version and the evidence up to a watermark."""

    inventory: str
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


# (database URL, inventory version, model id, document size limit)
_Base = tuple[str, InventorySpec, str, int]


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

    def encoder(
        self, model_dir: Path, *, threads: int | None = None, quantize: bool = False
    ) -> ContextEncoder:
        with self._lock:
            encoder = self._encoders.get((model_dir, quantize))
            if encoder is None:
                log.info("loading the encoder from %s", model_dir)
                encoder = ContextEncoder(model_dir, num_threads=threads, quantize=quantize)
                self._encoders[(model_dir, quantize)] = encoder
            return encoder

    def encoder_for(self, settings: Settings) -> ContextEncoder:
        """The encoder `settings` ask for (model directory, threads, int8)."""
        return self.encoder(
            resolve_model_dir(settings),
            threads=settings.torch_threads,
            quantize=settings.quantize_encoder,
        )

    def spec(self, session: Session, database_url: str, name: str, version: int) -> InventorySpec:
        """The inventory at `version`, parsed once: version snapshots never change (the
        snapshot row's id and time tell a re-created inventory of the same name apart)."""
        row = session.execute(
            select(InventoryVersion.id, InventoryVersion.created_at)
            .join(Inventory, Inventory.id == InventoryVersion.inventory_id)
            .where(Inventory.name == name, InventoryVersion.version == version)
        ).one_or_none()
        if row is None:
            return load_inventory_spec(session, name, version)  # raises NotFound
        key = (database_url, name, version, row.id, row.created_at)
        with self._lock:
            cached = self._specs.get(key)
            if cached is not None:
                self._specs.move_to_end(key)
                return cached
        spec = load_inventory_spec(session, name, version)
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

    def engine(self, session: Session, settings: Settings, pin: Pin) -> PinnedEngine:
        """The engine for `pin`, building or advancing one as needed (reads via `session`)."""
        spec = self.spec(session, settings.database_url, pin.inventory, pin.version)
        encoder = self.encoder_for(settings)
        base: _Base = (
            settings.database_url,
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
            inventory_id = get_inventory(session, pin.inventory).id
            if older:
                watermark, engine = max(older, key=lambda item: item[0])
                added = load_evidence(session, inventory_id, after=watermark, until=pin.watermark)
                with engine.lock:
                    engine.retired = True
                    engine.disambiguator.prototypes.add_evidence(added, encoder=encoder)
                fresh = PinnedEngine(
                    Disambiguator(
                        encoder,
                        spec,
                        prototypes=engine.disambiguator.prototypes,
                        finder=engine.disambiguator.finder,
                        max_document_chars=settings.max_document_bytes,
                    ),
                    pin.watermark,
                )
                del self._engines[(base, watermark)]
                self.advances += 1
            else:
                evidence = load_evidence(session, inventory_id, until=pin.watermark)
                fresh = PinnedEngine(
                    Disambiguator(
                        encoder,
                        spec,
                        evidence,
                        finder=self.finder(settings.database_url, spec),
                        max_document_chars=settings.max_document_bytes,
                    ),
                    pin.watermark,
                )
                self.builds += 1
            self._engines[(base, pin.watermark)] = fresh
            while len(self._engines) > self.max_engines:
                _, evicted = self._engines.popitem(last=False)
                evicted.retired = True
            return fresh


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
