"""Engine fixtures: a small inventory (the encoder and WordNet are the root conftest's, loaded
once per session)."""

from __future__ import annotations

import pytest

from service.engine.types import (
    InventorySettings,
    InventorySpec,
    SenseSpec,
    TermSpec,
)


@pytest.fixture(scope="session")
def bass_inventory() -> InventorySpec:
    """Two terms: a two-sense noun and a one-sense noun."""
    return InventorySpec(
        name="bait-and-tackle",
        version=3,
        settings=InventorySettings(review_threshold=0.6, abstain_threshold=0.15),
        terms=(
            TermSpec(
                term="bass",
                aliases=("bass guitar",),
                senses=(
                    SenseSpec(
                        "bass.fish",
                        "a freshwater or sea fish caught for sport or food",
                        (
                            "He landed a four-pound bass off the dock.",
                            "The lake is stocked with largemouth bass and trout.",
                        ),
                        ("dept:fishing",),
                    ),
                    SenseSpec(
                        "bass.music",
                        "the lowest part in music, or the instrument that plays it",
                        (
                            "She plays bass in a jazz trio.",
                            "Turn the bass down, the windows rattle.",
                        ),
                        ("dept:music",),
                    ),
                ),
            ),
            TermSpec(
                term="lantern",
                senses=(SenseSpec("lantern.lamp", "a light in a case with a handle"),),
            ),
        ),
    )
