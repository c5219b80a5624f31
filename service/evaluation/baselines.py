"""The two baselines every WordNet result is reported against, on the same data.

- Most frequent sense in the training file: for each (lemma, part of speech),
  the sense key seen most often among the training instances (first gold key of
  each), ties broken by WordNet's order. A lemma the training file never shows
  falls back to WordNet's first sense, so every instance with WordNet senses is
  answered, as in the published MFS figures.
- WordNet's first sense: the first sense of the lemma in the index file, whose
  order comes from WordNet's own sense counts.
"""

from __future__ import annotations

from collections import Counter, defaultdict
from collections.abc import Iterable

from nltk.corpus.reader.wordnet import WordNetCorpusReader

from service.engine.types import PartOfSpeech
from service.wordnet.corpus import CorpusSentence
from service.wordnet.senses import index_form, senses_of

LemmaPos = tuple[str, PartOfSpeech]


def training_sense_counts(sentences: Iterable[CorpusSentence]) -> dict[LemmaPos, Counter[str]]:
    """How often each sense key labels each (lemma, pos) in a training corpus."""
    counts: dict[LemmaPos, Counter[str]] = defaultdict(Counter)
    for sentence in sentences:
        for instance in sentence.instances:
            counts[(index_form(instance.lemma), instance.pos)][instance.sense_keys[0]] += 1
    return dict(counts)


def first_sense(reader: WordNetCorpusReader, lemma: str, pos: PartOfSpeech) -> str | None:
    """WordNet's first sense key of `lemma` as `pos`, or None if it has none."""
    senses = senses_of(reader, lemma, pos)
    return senses[0].key() if senses else None


def most_frequent_sense(
    reader: WordNetCorpusReader,
    counts: dict[LemmaPos, Counter[str]],
    lemma: str,
    pos: PartOfSpeech,
) -> str | None:
    """The training file's most frequent sense, else WordNet's first sense."""
    seen = counts.get((index_form(lemma), pos))
    order = [sense.key() for sense in senses_of(reader, lemma, pos)]
    if seen:
        rank = {key: position for position, key in enumerate(order)}
        return max(seen, key=lambda key: (seen[key], -rank.get(key, len(rank))))
    return order[0] if order else None
