"""Fixtures for the evaluation tests: WordNet, the external corpora and one encoder."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

os.environ.setdefault("HF_HUB_OFFLINE", "1")
os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")

SHARED_DATA = Path(__file__).resolve().parents[2].parent / "shared" / "data"
SEMCOR = SHARED_DATA / "semcor30.jsonl.gz"
SEMEVAL = SHARED_DATA / "semeval2013-en.jsonl.gz"


@pytest.fixture(scope="session")
def wordnet():  # type: ignore[no-untyped-def]
    if not Path("/usr/share/wordnet/index.sense").is_file():
        pytest.skip("WordNet 3.0 database not installed (apt-get install wordnet-base "
                    "wordnet-sense-index)")
    from service.engine.lexicon import open_wordnet

    return open_wordnet()


@pytest.fixture(scope="session")
def corpora() -> tuple[Path, Path]:
    for path in (SEMCOR, SEMEVAL):
        if not path.is_file():
            pytest.skip(f"external corpus missing: {path} (see ../shared/README.md)")
    return SEMCOR, SEMEVAL


@pytest.fixture(scope="session")
def last_layer_encoder():  # type: ignore[no-untyped-def]
    """The benchmark's encoder (last hidden layer), loaded once per session."""
    from service.engine import ContextEncoder

    return ContextEncoder(layers=(6,), batch_size=64)
