"""The WordNet reader against WordNet 3.0's published statistics and its own database lines."""

from __future__ import annotations

import gzip
import re
from pathlib import Path

import pytest

from service.wordnet.inventory import sense_spec
from service.wordnet.senses import lexname_tag, offset_tag, resolve_sense_key, senses_of
from tests.conftest import WORDNET_DIR

# WordNet 3.0's wnstats(7WN) manual page, "Number of words, synsets, and senses"
# (adjective figures include satellites). The same page ships with Debian's
# `wordnet` package as /usr/share/man/man7/wnstats.7WN.gz; the last test below
# re-reads it when present.
SYNSETS = {"n": 82_115, "v": 13_767, "a": 18_156, "r": 3_621}
UNIQUE_STRINGS = {"n": 117_798, "v": 11_529, "a": 21_479, "r": 4_481}
SENSE_PAIRS = {"n": 146_312, "v": 25_047, "a": 30_002, "r": 5_580}
WORD_SENSE_PAIRS = 206_941
WNSTATS_PAGE = Path("/usr/share/man/man7/wnstats.7WN.gz")


@pytest.mark.slow
def test_synset_counts_match_wnstats(wordnet) -> None:  # type: ignore[no-untyped-def]
    counts = {pos: sum(1 for _ in wordnet.all_synsets(pos)) for pos in SYNSETS}
    assert counts == SYNSETS


@pytest.mark.slow
def test_unique_strings_and_sense_pairs_match_wnstats(wordnet) -> None:  # type: ignore[no-untyped-def]
    strings = {pos: len(set(wordnet.all_lemma_names(pos))) for pos in UNIQUE_STRINGS}
    assert strings == UNIQUE_STRINGS
    # Every (lemma, sense) pair enumerated by senses_of, which the inventory and the
    # benchmark use: exactly WordNet's word-sense pairs, none twice, none missing.
    pairs = {pos: sum(len(senses_of(wordnet, lemma, pos)) for lemma in wordnet.all_lemma_names(pos))
             for pos in SENSE_PAIRS}
    assert pairs == SENSE_PAIRS
    assert sum(pairs.values()) == WORD_SENSE_PAIRS
    with (WORDNET_DIR / "index.sense").open(encoding="utf-8") as handle:
        assert sum(1 for _ in handle) == WORD_SENSE_PAIRS


@pytest.mark.skipif(not WNSTATS_PAGE.is_file(), reason="wnstats(7WN) manual page not installed")
def test_figures_above_are_those_of_the_installed_wnstats_page() -> None:
    with gzip.open(WNSTATS_PAGE, "rt", encoding="utf-8") as handle:
        page = handle.read()
    rows: dict[str, str] = {}
    # The first table on the page is strings / synsets / word-sense pairs; later ones differ.
    for name, figures in re.findall(r"^(Noun|Verb|Adjective|Adverb)/(\d+/\d+/\d+)$", page, re.M):
        rows.setdefault(name, figures)
    names = {"n": "Noun", "v": "Verb", "a": "Adjective", "r": "Adverb"}
    for pos, name in names.items():
        strings, synsets, pairs = (int(x) for x in rows[name].split("/"))
        assert (strings, synsets, pairs) == (UNIQUE_STRINGS[pos], SYNSETS[pos], SENSE_PAIRS[pos])


def _data_line(pos_file: str, offset: int) -> str:
    """The line at byte `offset` of a data file, as wndb(5WN) lays it out."""
    with (WORDNET_DIR / f"data.{pos_file}").open("rb") as handle:
        handle.seek(offset)
        return handle.readline().decode("utf-8")


def _parse_data_line(line: str) -> dict:
    """Parse a wndb(5WN) data line by hand: offset lex_filenum ss_type w_cnt (word lex_id)*
    p_cnt pointers ... | gloss."""
    head, gloss = line.split(" | ", 1)
    fields = head.split()
    word_count = int(fields[3], 16)  # w_cnt is two hexadecimal digits
    words = [fields[4 + 2 * i] for i in range(word_count)]
    return {
        "offset": int(fields[0]),
        "lex_filenum": int(fields[1]),
        "ss_type": fields[2],
        "words": words,
        "gloss": gloss.strip(),
    }


def _index_sense_offset(key: str) -> int:
    with (WORDNET_DIR / "index.sense").open(encoding="utf-8") as handle:
        for line in handle:
            if line.startswith(key + " "):
                return int(line.split()[1])
    raise AssertionError(f"{key} not in index.sense")


@pytest.mark.parametrize(
    ("key", "pos_file", "lexname"),
    [
        ("dog%1:05:00::", "noun", "noun.animal"),  # lex file 05
        ("run%2:38:00::", "verb", "verb.motion"),  # lex file 38; Debian's data.verb offsets
        ("recent%5:00:00:past:00", "adj", "adj.all"),  # an adjective satellite
    ],
)
def test_reader_and_sense_spec_agree_with_the_raw_database_line(  # type: ignore[no-untyped-def]
    wordnet, key: str, pos_file: str, lexname: str
) -> None:
    offset = _index_sense_offset(key)
    raw = _parse_data_line(_data_line(pos_file, offset))
    assert raw["offset"] == offset

    sense = resolve_sense_key(wordnet, key)
    assert sense is not None and sense.key() == key
    synset = sense.synset()
    assert synset.offset() == offset
    assert synset.pos() == raw["ss_type"]
    assert [lemma.name() for lemma in synset.lemmas()] == [
        re.sub(r"\([a-z]+\)$", "", word) for word in raw["words"]  # adjective markers like (p)
    ]
    assert synset.lexname() == lexname
    # The gloss field is the definition, then examples in double quotes, separated by "; ".
    definition = raw["gloss"].split('; "')[0].strip()
    assert synset.definition() == definition
    for example in synset.examples():
        assert f'"{example}"' in raw["gloss"]

    spec = sense_spec(sense)
    assert spec.sense_id == key
    assert spec.gloss == definition
    assert spec.tags == (f"wn:offset:{raw['ss_type']}{offset:08d}", f"wn:lexname:{lexname}")
    assert offset_tag(synset) == spec.tags[0] and lexname_tag(synset) == spec.tags[1]
    assert sorted(spec.examples) == sorted(synset.examples())


def test_unknown_and_malformed_keys_do_not_resolve(wordnet) -> None:  # type: ignore[no-untyped-def]
    assert resolve_sense_key(wordnet, "dog%1:05:99::") is None
    assert resolve_sense_key(wordnet, "not-a-key") is None
    assert resolve_sense_key(wordnet, "dog%9:05:00::") is None
