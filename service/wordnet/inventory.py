"""Build a whichsense inventory whose senses are WordNet 3.0 senses.

One term per lemma (its surface form, "sea bass" for `sea_bass`), carrying
the senses of every part of speech the lemma has unless a part of speech is
asked for. The service finds occurrences by surface form and needs terms that
are unique by it, so a lemma that is both noun and verb stays one term; its
`pos` is set only when a single part of speech remains. (The benchmark does
not go through inventories: it asks `senses_of(lemma, pos)` directly.)

Each sense: id = sense key (the only stable identity), gloss = the synset's
definition, examples = the synset's examples, those containing the lemma
first, and tags `wn:offset:<ss_type><offset>` and `wn:lexname:<file>`. The
offsets are Debian's: its patched `data.verb` and `data.adj` put verb and
adjective synsets a few bytes away from Princeton's, so only the sense key is
comparable across installations.
"""

from __future__ import annotations

import re
from collections.abc import Iterable

from nltk.corpus.reader.wordnet import Lemma, WordNetCorpusReader

from service.engine.types import InventorySettings, InventorySpec, PartOfSpeech, SenseSpec, TermSpec
from service.wordnet.senses import (
    POS_ORDER,
    index_form,
    lemma_senses,
    lexname_tag,
    offset_tag,
    surface_form,
)


def mentions_lemma(example: str, lemma: str) -> bool:
    """Whether `example` contains the lemma as a word start ("dog" in "dogs barked")."""
    words = [re.escape(word) for word in surface_form(lemma).split()]
    pattern = r"\b" + r"\W+".join(words)
    return re.search(pattern, example, flags=re.IGNORECASE) is not None


def sense_spec(sense: Lemma) -> SenseSpec:
    """One WordNet sense as an inventory sense."""
    synset = sense.synset()
    examples = synset.examples()
    ordered = [e for e in examples if mentions_lemma(e, sense.name())]
    ordered += [e for e in examples if not mentions_lemma(e, sense.name())]
    return SenseSpec(
        sense_id=sense.key(),
        gloss=synset.definition().strip(),
        examples=tuple(ordered),
        tags=(offset_tag(synset), lexname_tag(synset)),
    )


def term_spec(
    reader: WordNetCorpusReader, lemma: str, pos: PartOfSpeech | None = None
) -> TermSpec | None:
    """The term for `lemma` (senses of all its parts of speech, or of `pos`); None if unknown."""
    by_pos = lemma_senses(reader, lemma, pos)
    if not by_pos:
        return None
    senses = tuple(sense_spec(sense) for p in POS_ORDER for sense in by_pos.get(p, ()))
    only_pos = next(iter(by_pos)) if len(by_pos) == 1 else None
    return TermSpec(
        term=surface_form(index_form(lemma)),
        senses=senses,
        pos=only_pos,
        case="insensitive",
        inflect=True,
    )


def all_lemmas(reader: WordNetCorpusReader, pos: PartOfSpeech | None = None) -> list[str]:
    """Every lemma in the index files (of `pos`, if given), sorted."""
    return sorted(set(reader.all_lemma_names(pos) if pos else reader.all_lemma_names()))


def build_wordnet_inventory(
    reader: WordNetCorpusReader,
    name: str,
    lemmas: Iterable[str],
    pos: PartOfSpeech | None = None,
    description: str = "",
    settings: InventorySettings | None = None,
) -> tuple[InventorySpec, list[str]]:
    """The inventory for `lemmas` and the lemmas WordNet does not know (in input order)."""
    terms: list[TermSpec] = []
    missing: list[str] = []
    seen: set[str] = set()
    for lemma in lemmas:
        form = index_form(lemma)
        if not form or form in seen:
            continue
        seen.add(form)
        term = term_spec(reader, form, pos)
        if term is None:
            missing.append(lemma)
        else:
            terms.append(term)
    spec = InventorySpec(
        name=name,
        version=1,
        terms=tuple(terms),
        settings=settings or InventorySettings(),
        description=description or "WordNet 3.0 senses (sense keys as sense ids)",
    )
    return spec, missing
