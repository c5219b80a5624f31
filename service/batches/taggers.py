"""Where the worker gets its engine: the process-wide cache, pinned per batch.

`Tagger` is the seam: the worker needs only "tag these documents for this
claim", so a deployment (or a test) can wrap the engine, e.g. to add tracing
or to make one document fail on purpose.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Protocol

from sqlalchemy.orm import Session, sessionmaker

from service.batches.leases import Claim
from service.config import Settings
from service.engine import Document, DocumentResult
from service.store.database import read_only
from service.tagging.engines import EngineCache, Pin, PinnedEngine, shared_engines, tag_pinned


class Tagger(Protocol):
    def tag(
        self, claim: Claim, documents: Sequence[Document], *, rationale: bool
    ) -> list[DocumentResult]: ...


class EngineTagger:
    """Tags with the cached engine for the claim's inventory version and evidence watermark."""

    def __init__(
        self,
        settings: Settings,
        sessions: sessionmaker[Session],
        engines: EngineCache | None = None,
    ) -> None:
        self.settings = settings
        # The engine only reads (inventory snapshot, evidence); building one encodes for
        # seconds, which must not hold SQLite's one write lock.
        self.sessions = read_only(sessions)
        self.engines = engines or shared_engines()

    def preload(self) -> None:
        """Load the encoder now, so a broken model directory stops the worker at start."""
        self.engines.encoder(self.settings)

    def tag(
        self, claim: Claim, documents: Sequence[Document], *, rationale: bool
    ) -> list[DocumentResult]:
        pin = Pin(claim.inventory_id, claim.inventory_version, claim.evidence_watermark)

        def engine() -> PinnedEngine:
            with self.sessions() as session:
                found = self.engines.engine(session, self.settings, pin)
                session.rollback()
                return found

        return tag_pinned(engine, documents, rationale=rationale)
