"""The offline WordNet reader: lexnames generated, nothing downloaded, one reader per folder."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from service.engine.lexicon import LEXICOGRAPHER_FILES, lexnames_text, open_wordnet

WORDNET = Path("/usr/share/wordnet")
pytestmark = pytest.mark.skipif(
    not (WORDNET / "index.noun").is_file(), reason="WordNet 3.0 database not installed"
)


def test_lexnames_lists_the_45_lexicographer_files():
    # WordNet 3.0 lexnames(5WN): "00 adj.all 3" ... "44 adj.ppl 3" (recalled from memory).
    rows = [line.split("\t") for line in lexnames_text().splitlines()]
    assert len(rows) == 45 == len(LEXICOGRAPHER_FILES)
    assert rows[0] == ["00", "adj.all", "3"]
    assert rows[3] == ["03", "noun.Tops", "1"]
    assert rows[29] == ["29", "verb.body", "2"]
    assert rows[44] == ["44", "adj.ppl", "3"]


def test_reader_works_offline_and_is_shared(wordnet):
    assert open_wordnet() is wordnet
    assert wordnet.get_version() == "3.0"
    # Sense key bass%1:13:02:: names the fish meaning (WordNet 3.0 index.sense).
    lemma = wordnet.lemma_from_key("bass%1:13:02::")
    assert lemma.synset().lexname() == "noun.food"
    assert wordnet._morphy("mice", "n") == ["mouse"]
    assert wordnet.map_wn() is None  # no attempt to load NLTK's own wordnet package


def test_a_folder_without_lexnames_gets_a_private_copy(tmp_path):
    source = tmp_path / "wn"
    source.mkdir()
    for entry in WORDNET.iterdir():
        if entry.is_file():
            shutil.copyfile(entry, source / entry.name)
    assert not (source / "lexnames").exists()
    reader = open_wordnet(source, cache_dir=tmp_path / "cache")
    assert reader.synsets("lantern")[0].lexname() == "noun.artifact"
    (copy,) = (tmp_path / "cache").iterdir()
    assert (copy / "lexnames").read_text() == lexnames_text()
    assert not (source / "lexnames").exists()


def test_missing_database_is_a_clear_error(tmp_path):
    with pytest.raises(FileNotFoundError, match=r"index\.noun"):
        open_wordnet(tmp_path)
