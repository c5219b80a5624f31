"""WordNet senses of a lemma, and the labels that name them.

A sense is a (lemma, synset) pair, named by its sense key
(`lemma%ss_type:lex_filenum:lex_id:head_word:head_id`). Keys are the only
stable identity: Debian patched `data.verb` and `data.adj`, so byte offsets of
verb and adjective synsets differ from Princeton's by a few bytes. Offsets are
still accepted as labels, read as offsets into *this* database.
"""

from __future__ import annotations

import re
from functools import lru_cache

from nltk.corpus.reader.wordnet import Lemma, Synset, WordNetCorpusReader, WordNetError

from service.engine.types import PartOfSpeech

POS_ORDER: tuple[PartOfSpeech, ...] = ("n", "v", "a", "r")
# Sense-key ss_type digits (senseidx(5WN)): 1 noun, 2 verb, 3 adjective, 4 adverb, 5 satellite.
SS_TYPE_TO_POS: dict[str, PartOfSpeech] = {"1": "n", "2": "v", "3": "a", "4": "r", "5": "a"}
# Synset identifiers we accept besides sense keys: "wn:02084071n" (documented form) or
# "02084071-n" (the common id form); the letter may be n, v, a, s or r.
SYNSET_ID = re.compile(r"^(?:wn:(?P<a>\d{8})(?P<pa>[nvasr])|(?P<b>\d{8})-(?P<pb>[nvasr]))$")


def index_form(lemma: str) -> str:
    """How WordNet's index spells a lemma: lower case, underscores between words."""
    return "_".join(lemma.strip().lower().split())


def surface_form(lemma_name: str) -> str:
    """A WordNet lemma as text: underscores become spaces."""
    return lemma_name.replace("_", " ")


def synset_pos(synset: Synset) -> PartOfSpeech:
    """The part of speech with satellites folded into adjectives."""
    pos = synset.pos()
    return "a" if pos == "s" else pos


def offset_tag(synset: Synset) -> str:
    """`wn:offset:<ss_type><8-digit offset>`; offsets are Debian's, see the module docstring."""
    return f"wn:offset:{synset.pos()}{synset.offset():08d}"


def lexname_tag(synset: Synset) -> str:
    return f"wn:lexname:{synset.lexname()}"


def senses_of(reader: WordNetCorpusReader, lemma: str, pos: PartOfSpeech) -> tuple[Lemma, ...]:
    """The senses of exactly `lemma` as `pos`, in WordNet's order (most frequent first).

    No morphological reduction: "axes" does not yield the senses of "axe" or "axis".
    Adjective satellites count as adjectives.
    """
    return _senses_of(reader, index_form(lemma), pos)


@lru_cache(maxsize=65536)
def _senses_of(reader: WordNetCorpusReader, form: str, pos: PartOfSpeech) -> tuple[Lemma, ...]:
    found: list[Lemma] = []
    seen: set[str] = set()
    # NLTK's synsets() also returns the synsets of morphy's base forms, after the form's
    # own; a synset listed under both ("ABCs" under abcs and abc) is kept once.
    for synset in reader.synsets(form, pos):
        if synset.name() in seen:
            continue
        seen.add(synset.name())
        for sense in synset.lemmas():
            if sense.name().lower() == form:
                found.append(sense)
                break
    return tuple(found)


def lemma_senses(
    reader: WordNetCorpusReader, lemma: str, pos: PartOfSpeech | None = None
) -> dict[PartOfSpeech, tuple[Lemma, ...]]:
    """Senses of `lemma` per part of speech (only those it has), in n, v, a, r order."""
    wanted = (pos,) if pos else POS_ORDER
    by_pos = {p: senses_of(reader, lemma, p) for p in wanted}
    return {p: senses for p, senses in by_pos.items() if senses}


@lru_cache(maxsize=8)
def sense_index(reader: WordNetCorpusReader) -> dict[str, tuple[str, int]]:
    """index.sense as a dict: sense key -> (synset pos letter, offset).

    Read once per reader; a binary search of the file per key (what NLTK's
    lemma_from_key does) makes reading SemCor take minutes.
    """
    letters = {"1": "n", "2": "v", "3": "a", "4": "r", "5": "s"}
    index: dict[str, tuple[str, int]] = {}
    with reader.open("index.sense") as handle:
        for line in handle:
            fields = line.split()
            if len(fields) >= 2 and "%" in fields[0]:
                ss_type = fields[0].split("%", 1)[1][:1]
                index[fields[0]] = (letters.get(ss_type, "n"), int(fields[1]))
    return index


def resolve_sense_key(reader: WordNetCorpusReader, key: str) -> Lemma | None:
    """The sense a key names, or None when this database has no such key."""
    key = key.strip().lower()  # keys are lower case in index.sense
    found = sense_index(reader).get(key)
    if found is None:
        return None
    try:
        synset = reader.synset_from_pos_and_offset(*found)
    except (WordNetError, ValueError):
        return None
    if synset is None:
        return None
    for sense in synset.lemmas():
        if sense.key() == key:
            return sense
    return None


def resolve_synset_id(reader: WordNetCorpusReader, ident: str, lemma: str) -> Lemma | None:
    """The sense of `lemma` in the synset an offset id names, or None."""
    match = SYNSET_ID.match(ident.strip())
    if not match:
        return None
    offset = int(match.group("a") or match.group("b"))
    letter = match.group("pa") or match.group("pb")
    try:
        synset = reader.synset_from_pos_and_offset(letter, offset)
    except (WordNetError, ValueError):
        return None
    if synset is None:
        return None
    form = index_form(lemma)
    for sense in synset.lemmas():
        if sense.name().lower() == form:
            return sense
    return None


def resolve_label(reader: WordNetCorpusReader, label: str, lemma: str) -> Lemma | None:
    """A sense key, or a synset id read together with the instance's lemma."""
    if "%" in label:
        return resolve_sense_key(reader, label)
    return resolve_synset_id(reader, label, lemma)
