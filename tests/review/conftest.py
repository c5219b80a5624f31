"""Fixtures for the review queue: a finished batch whose results wait for review."""

from __future__ import annotations

import copy
from dataclasses import dataclass
from typing import Any

import pytest

from tests.pipeline import Pipeline, make_pipeline, pipeline, receiver, warm_engines

__all__ = ["make_pipeline", "pipeline", "receiver", "warm_engines"]

# Sentences whose sense is known, so decisions can be checked against the truth.
LABELED = [
    ("I caught a bass at the lake before sunrise.", "bass", "bass.fish"),
    ("The bass line in that song shakes the floor.", "bass", "bass.music"),
    ("We grilled the bass we had caught with lemon and herbs.", "bass", "bass.fish"),
    ("He turned up the bass on the car stereo until the mirrors shook.", "bass", "bass.music"),
    ("The fishermen netted a striped bass near the pier.", "bass", "bass.fish"),
    ("She plays bass in a jazz trio on Fridays.", "bass", "bass.music"),
    ("A largemouth bass struck the lure at dusk.", "bass", "bass.fish"),
    ("The bass drum and the bass guitar carried the song.", "bass", "bass.music"),
    ("My mouse stopped working, so I bought a wireless one.", "mouse", "mouse.device"),
    ("A mouse ran across the kitchen and hid behind the oven.", "mouse", "mouse.animal"),
    ("Click twice with the mouse to open the file.", "mouse", "mouse.device"),
    ("The cat watched the mouse hole all night.", "mouse", "mouse.animal"),
]


def gold_sense(text: str, term: str) -> str:
    for sentence, labeled_term, sense in LABELED:
        if sentence == text and labeled_term == term:
            return sense
    raise KeyError(text)


@dataclass
class Queued:
    """A pipeline whose one batch is done, with everything below `threshold` for review."""

    pipeline: Pipeline
    batch_id: str
    documents: list[dict[str, Any]]

    @property
    def keys(self) -> dict[str, str]:
        return self.pipeline.keys


def queue_documents(copies: int = 1) -> list[dict[str, Any]]:
    """The labeled sentences as documents `<letter><index>`: d00.., e00.. for a second copy."""
    return [
        {"id": f"{'defg'[copy]}{i:02d}", "text": text}
        for copy in range(copies)
        for i, (text, _, _) in enumerate(LABELED)
    ]


def gold_for_document(document_id: str) -> str:
    """The gold sense of every occurrence in a document made by `queue_documents`."""
    return LABELED[int(document_id[1:])][2]


REVIEW_THRESHOLD = 0.99


@pytest.fixture
def inventory_document() -> dict[str, Any]:
    """The small test inventory, with every answer below 0.99 sent to review."""
    from tests.conftest import SMALL_INVENTORY

    document = copy.deepcopy(SMALL_INVENTORY)
    document["settings"] = {"review_threshold": REVIEW_THRESHOLD}
    return document


@pytest.fixture
def queued(make_pipeline: Any) -> Queued:
    """A finished batch of the labeled sentences, rationale on, its results in review."""
    built = make_pipeline()
    docs = queue_documents()
    batch = built.submit(docs, rationale=True)
    built.worker().run_until_idle()
    assert built.status(batch["id"])["state"] == "done"
    return Queued(built, batch["id"], docs)
