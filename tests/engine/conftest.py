"""Engine fixtures: one encoder and one WordNet reader per test session (loading costs seconds)."""

from __future__ import annotations

import os

import pytest

os.environ.setdefault("HF_HUB_OFFLINE", "1")
os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")

from service.engine.encoder import ContextEncoder
from service.engine.lexicon import open_wordnet
from service.engine.types import (
    InventorySettings,
    InventorySpec,
    SenseSpec,
    TermSpec,
)


@pytest.fixture(scope="session")
def encoder() -> ContextEncoder:
    return ContextEncoder()


@pytest.fixture(scope="session")
def wordnet():
    return open_wordnet()


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
