"""Stream a sense-annotated corpus (JSON Lines, optionally gzip) and resolve its labels.

One line per sentence: `tokens`, `instances` (token `start`/`end`, end
exclusive, `lemma`, `pos`, `sense_keys`), plus optional `doc` and `sent`.
The sentence text is the tokens joined by single spaces; an underscore inside
a token (the corpora's multi-word marker, "took_place") is written as a space,
which keeps every character offset where it was. Instances get character
offsets into that text.

Labels are WordNet 3.0 sense keys. Two other spellings are accepted:
alternatives packed into one key ("favorable%5:00:00:friendly:01;3:00:02::",
as SemCor writes some) are split, and synset ids ("wn:02084071n" or
"02084071-n", offsets into the local database) are read together with the
instance's lemma. Labels that still name no sense are counted and the
instance is skipped when none of its labels resolve.
"""

from __future__ import annotations

import gzip
import json
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from nltk.corpus.reader.wordnet import WordNetCorpusReader

from service.engine.types import Evidence, PartOfSpeech
from service.line_errors import LineError
from service.wordnet.senses import index_form, resolve_label, surface_form

POS_LETTERS: frozenset[str] = frozenset({"n", "v", "a", "r"})
MAX_UNRESOLVED_EXAMPLES = 20


class CorpusFormatError(LineError):
    """A line of the corpus file does not follow the format; names the line."""


@dataclass(frozen=True)
class CorpusInstance:
    """One annotated span with character offsets into its sentence's text."""

    instance_id: str
    start: int
    end: int
    lemma: str
    pos: PartOfSpeech
    sense_keys: tuple[str, ...]  # resolved, canonical, in the file's order; never empty

    @property
    def term(self) -> str:
        """The inventory term a WordNet inventory uses for this lemma."""
        return surface_form(index_form(self.lemma))


@dataclass(frozen=True)
class CorpusSentence:
    doc: str
    sent: str
    text: str
    instances: tuple[CorpusInstance, ...]


@dataclass
class CorpusStats:
    """What reading a corpus found; printed by the CLI and kept in benchmark results."""

    sentences: int = 0
    instances: int = 0
    resolved: int = 0
    skipped_unresolved: int = 0  # instances none of whose labels resolve
    unresolved_labels: int = 0  # label strings (or packed parts) naming no sense
    recovered_by_splitting: int = 0  # instances resolved only after splitting packed keys
    unresolved_examples: list[str] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        return {
            "sentences": self.sentences,
            "instances": self.instances,
            "resolved": self.resolved,
            "skipped_unresolved": self.skipped_unresolved,
            "unresolved_labels": self.unresolved_labels,
            "recovered_by_splitting": self.recovered_by_splitting,
            "unresolved_examples": list(self.unresolved_examples),
        }


def sentence_text(tokens: list[str]) -> tuple[str, list[tuple[int, int]]]:
    """Tokens joined by single spaces (underscores as spaces), and each token's offsets."""
    spans: list[tuple[int, int]] = []
    position = 0
    for token in tokens:
        spans.append((position, position + len(token)))
        position += len(token) + 1
    return " ".join(token.replace("_", " ") for token in tokens), spans


def split_packed_key(label: str) -> list[str]:
    """`lemma%k1;k2` -> [`lemma%k1`, `lemma%k2`]; other labels unchanged."""
    if "%" not in label or ";" not in label:
        return [label]
    lemma, rest = label.split("%", 1)
    return [f"{lemma}%{part}" for part in rest.split(";") if part]


def resolve_labels(
    reader: WordNetCorpusReader, labels: Iterable[str], lemma: str, stats: CorpusStats
) -> tuple[str, ...]:
    """Canonical sense keys for `labels`, in order, without repeats; counts failures."""
    keys: list[str] = []
    resolved_directly = False
    for label in labels:
        sense = resolve_label(reader, label, lemma)
        if sense is not None:
            resolved_directly = True
            found = [sense.key()]
        else:
            parts = split_packed_key(label)
            packed = len(parts) > 1
            senses = [resolve_label(reader, part, lemma) for part in parts] if packed else []
            found = [sense.key() for sense in senses if sense is not None]
        if not found:
            stats.unresolved_labels += 1
            if len(stats.unresolved_examples) < MAX_UNRESOLVED_EXAMPLES:
                stats.unresolved_examples.append(label)
        keys.extend(key for key in found if key not in keys)
    if keys and not resolved_directly:
        stats.recovered_by_splitting += 1
    return tuple(keys)


def _open_text(path: Path) -> Any:
    with path.open("rb") as probe:
        gzipped = probe.read(2) == b"\x1f\x8b"
    if gzipped:
        return gzip.open(path, "rt", encoding="utf-8")
    return path.open("r", encoding="utf-8")


def _required(obj: dict[str, Any], name: str, kind: type, where: tuple[str, int]) -> Any:
    value = obj.get(name)
    if not isinstance(value, kind) or (isinstance(value, bool) and kind is int):
        raise CorpusFormatError(where[0], where[1], f"'{name}' must be {kind.__name__}")
    return value


def parse_sentence(
    obj: Any, reader: WordNetCorpusReader, stats: CorpusStats, where: tuple[str, int]
) -> CorpusSentence:
    """One corpus line as a sentence with resolved instances (unresolvable ones dropped)."""
    if not isinstance(obj, dict):
        raise CorpusFormatError(where[0], where[1], "a line must hold a JSON object")
    tokens = _required(obj, "tokens", list, where)
    if not all(isinstance(token, str) for token in tokens):
        raise CorpusFormatError(where[0], where[1], "'tokens' must be strings")
    raw_instances = _required(obj, "instances", list, where)
    doc = str(obj.get("doc", ""))
    sent = str(obj.get("sent", where[1]))
    text, spans = sentence_text(tokens)
    instances: list[CorpusInstance] = []
    for number, raw in enumerate(raw_instances):
        if not isinstance(raw, dict):
            raise CorpusFormatError(where[0], where[1], f"instance {number} is not an object")
        start = _required(raw, "start", int, where)
        end = _required(raw, "end", int, where)
        if not 0 <= start < end <= len(tokens):
            raise CorpusFormatError(
                where[0], where[1], f"instance {number}: tokens [{start}, {end}) out of range"
            )
        lemma = _required(raw, "lemma", str, where)
        pos = raw.get("pos")
        if pos not in POS_LETTERS:
            raise CorpusFormatError(where[0], where[1], f"instance {number}: pos must be n/v/a/r")
        labels = _required(raw, "sense_keys", list, where)
        instance_id = str(raw.get("id") or f"{doc}.{sent}.{number}")
        stats.instances += 1
        keys = resolve_labels(reader, [str(label) for label in labels], lemma, stats)
        if not keys:
            stats.skipped_unresolved += 1
            continue
        stats.resolved += 1
        instances.append(
            CorpusInstance(
                instance_id=instance_id,
                start=spans[start][0],
                end=spans[end - 1][1],
                lemma=lemma,
                pos=pos,
                sense_keys=keys,
            )
        )
    stats.sentences += 1
    return CorpusSentence(doc=doc, sent=sent, text=text, instances=tuple(instances))


def read_corpus(
    path: str | Path, reader: WordNetCorpusReader, stats: CorpusStats | None = None
) -> Iterator[CorpusSentence]:
    """Stream sentences from `path` (gzip or plain), filling `stats` as it goes."""
    stats = stats if stats is not None else CorpusStats()
    path = Path(path)
    with _open_text(path) as handle:
        for line_number, line in enumerate(handle, start=1):
            if not line.strip():
                continue
            try:
                obj = json.loads(line)
            except json.JSONDecodeError as error:
                raise CorpusFormatError(str(path), line_number, f"not JSON: {error.msg}") from None
            yield parse_sentence(obj, reader, stats, (str(path), line_number))


def is_corpus_line(obj: Any) -> bool:
    """Whether a parsed JSON line looks like this format (vs. a labeled occurrence)."""
    return isinstance(obj, dict) and "tokens" in obj and "instances" in obj


def corpus_evidence(sentences: Iterable[CorpusSentence], first_id: int = 1) -> Iterator[Evidence]:
    """One Evidence per instance, labeled with its first gold sense key.

    A second accepted key would pull two prototypes towards the same
    occurrence, so only the first (the annotators' preferred one) is kept.
    """
    next_id = first_id
    for sentence in sentences:
        for instance in sentence.instances:
            yield Evidence(
                evidence_id=next_id,
                term=instance.term,
                sense_id=instance.sense_keys[0],
                text=sentence.text,
                start=instance.start,
                end=instance.end,
                source="corpus",
            )
            next_id += 1
