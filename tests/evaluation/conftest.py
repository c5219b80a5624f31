"""Fixtures for the evaluation tests: the external corpora (WordNet and the encoder are the
root conftest's)."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.conftest import shared_data


@pytest.fixture(scope="session")
def corpora() -> tuple[Path, Path]:
    """(SemCor 3.0, SemEval-2013 English) as converted in ../shared/data."""
    semcor, semeval = shared_data("semcor30.jsonl.gz", "semeval2013-en.jsonl.gz")
    return semcor, semeval
