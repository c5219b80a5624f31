"""Building whichsense inventories from WordNet senses, and the CLI that writes them."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from service.cli.wordnet import add_wordnet_parser
from service.config import Settings
from service.inventory.document import parse_inventory_document, validate_inventory_document
from service.wordnet.inventory import build_wordnet_inventory, mentions_lemma, term_spec
from service.wordnet.senses import senses_of


def test_a_lemma_with_several_parts_of_speech_is_one_term_without_pos(wordnet) -> None:  # type: ignore[no-untyped-def]
    term = term_spec(wordnet, "bass")
    assert term is not None
    assert term.term == "bass" and term.pos is None
    ids = [sense.sense_id for sense in term.senses]
    nouns = [s.key() for s in senses_of(wordnet, "bass", "n")]
    adjectives = [s.key() for s in senses_of(wordnet, "bass", "a")]
    assert ids == nouns + adjectives  # WordNet order, nouns before adjectives
    assert len(nouns) == 8 and len(adjectives) == 1  # WordNet 3.0: bass has 8 noun senses, 1 adj
    assert all(sense_id.startswith("bass%") for sense_id in ids)


def test_pos_filter_sets_the_term_pos(wordnet) -> None:  # type: ignore[no-untyped-def]
    term = term_spec(wordnet, "bass", "n")
    assert term is not None and term.pos == "n" and len(term.senses) == 8
    assert term_spec(wordnet, "bass", "v") is None


def test_multi_word_lemma_becomes_a_spaced_term(wordnet) -> None:  # type: ignore[no-untyped-def]
    term = term_spec(wordnet, "Sea_Bass")
    assert term is not None and term.term == "sea bass" and term.pos == "n"
    assert {sense.sense_id.split("%")[0] for sense in term.senses} == {"sea_bass"}


def test_only_the_exact_lemma_no_morphological_reduction(wordnet) -> None:  # type: ignore[no-untyped-def]
    # NLTK's synsets() would reduce "dogs" to "dog" and "axes" to "ax"/"axis".
    assert wordnet.synsets("dogs", "n") and wordnet.synsets("axes", "n")
    assert term_spec(wordnet, "dogs") is None
    assert senses_of(wordnet, "axes", "n") == ()
    # "ABCs" is indexed under both abcs and abc; it is one sense of abcs, not two.
    assert [s.key() for s in senses_of(wordnet, "abcs", "n")] == ["abcs%1:09:00::"]


def test_examples_mentioning_the_lemma_come_first() -> None:
    assert mentions_lemma("the dogs barked all night", "dog")
    assert mentions_lemma("a Sea  Bass on the line", "sea_bass")
    assert not mentions_lemma("hotdog stands", "dog")


def test_inventory_document_validates_and_reports_unknown_lemmas(wordnet) -> None:  # type: ignore[no-untyped-def]
    spec, missing = build_wordnet_inventory(
        wordnet, "wn-test", ["bass", "mouse", "bass", "qqqzzz"], description="test"
    )
    assert missing == ["qqqzzz"]
    assert [t.term for t in spec.terms] == ["bass", "mouse"]
    from service.inventory.document import spec_to_document

    document = spec_to_document(spec)
    assert validate_inventory_document(document) == []
    assert parse_inventory_document(document).terms == spec.terms


def test_cli_writes_an_inventory_file(tmp_path: Path, wordnet) -> None:  # type: ignore[no-untyped-def]
    parser = argparse.ArgumentParser()
    add_wordnet_parser(parser.add_subparsers())
    lemma_file = tmp_path / "lemmas.txt"
    lemma_file.write_text("# terms for the demo\nmouse\nsea bass\n", encoding="utf-8")
    output = tmp_path / "wn.json"
    args = parser.parse_args(
        ["wordnet", "wn-demo", "--lemma", "bass", "--lemmas-from", str(lemma_file),
         "--pos", "n", "-o", str(output)]
    )
    assert args.func(args, Settings(cache_dir=tmp_path / "cache")) == 0
    document = json.loads(output.read_text(encoding="utf-8"))
    spec = parse_inventory_document(document)
    assert [t.term for t in spec.terms] == ["bass", "mouse", "sea bass"]
    assert all(t.pos == "n" for t in spec.terms)
    first = spec.terms[0].senses[0]
    assert first.sense_id == senses_of(wordnet, "bass", "n")[0].key()
    assert any(tag.startswith("wn:lexname:noun.") for tag in first.tags)
