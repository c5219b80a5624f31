"""Shared fixtures for the WordNet tests: the system database, opened once."""

from __future__ import annotations

from pathlib import Path

import pytest

WORDNET_DIR = Path("/usr/share/wordnet")
SHARED_DATA = Path(__file__).resolve().parents[2].parent / "shared" / "data"


@pytest.fixture(scope="session")
def wordnet():  # type: ignore[no-untyped-def]
    if not (WORDNET_DIR / "index.sense").is_file():
        pytest.skip("WordNet 3.0 database not installed (apt-get install wordnet-base "
                    "wordnet-sense-index)")
    from service.engine.lexicon import open_wordnet

    return open_wordnet(WORDNET_DIR)
