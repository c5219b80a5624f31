"""The engine factory: the engine it builds has fitted its trust settings on the evidence."""

from __future__ import annotations

from typing import Any

from service.config import Settings
from service.engine.types import Evidence, InventorySpec, SenseSpec, TermSpec
from service.tagging.engines import build_disambiguator

INVENTORY = InventorySpec(
    name="factory-check",
    version=1,
    terms=(
        TermSpec(
            term="bass",
            senses=(
                SenseSpec("bass.fish", "a freshwater or sea fish", ("He landed a bass.",)),
                SenseSpec("bass.music", "the lowest part in music", ("She plays bass.",)),
            ),
        ),
    ),
)

LINES = {
    "bass.fish": [
        "We caught a striped bass off the pier.",
        "The bass took the lure near the weeds.",
        "Grill the bass fillets with lemon.",
    ],
    "bass.music": [
        "The bass line carries the whole song.",
        "He tuned the bass before the gig.",
        "Turn up the bass on the amplifier.",
    ],
}


def _evidence() -> list[Evidence]:
    items = []
    for sense_id, lines in LINES.items():
        for line in lines:
            start = line.index("bass")
            items.append(Evidence(len(items) + 1, "bass", sense_id, line, start, start + 4))
    # a label of a sense this version no longer has: left out, not an error
    items.append(Evidence(99, "bass", "bass.retired", "An old bass label.", 7, 11))
    return items


def test_trust_is_fitted_with_the_evidence_the_engine_was_built_with(
    encoder: Any, tmp_path: Any
) -> None:
    settings = Settings(cache_dir=tmp_path)
    cold = build_disambiguator(settings, INVENTORY, encoder=encoder)
    warm = build_disambiguator(settings, INVENTORY, _evidence(), encoder=encoder)
    assert warm.prototypes.counts("bass.fish")[1] == 3
    # every stored label is a cross-fitted item of the trust fit
    assert warm.trust.labels == cold.trust.labels + 6
    assert warm.trust.missing.labels > cold.trust.missing.labels
