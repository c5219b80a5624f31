"""Plain data that crosses the engine's boundary.

The engine never sees the database or HTTP: the store turns rows into these
frozen values and the shell turns results back into rows or JSON. Keeping them
immutable lets a prototype cache key on an inventory version safely.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal

CaseRule = Literal["insensitive", "exact"]
PartOfSpeech = Literal["n", "v", "a", "r"]
Status = Literal["assigned", "review", "abstained"]
EvidenceSource = Literal["corpus", "review", "import"]


@dataclass(frozen=True)
class SenseSpec:
    """One sense of a term, as the curator wrote it."""

    sense_id: str
    gloss: str
    examples: tuple[str, ...] = ()
    tags: tuple[str, ...] = ()


@dataclass(frozen=True)
class TermSpec:
    """A surface form (plus aliases) whose occurrences are to be disambiguated."""

    term: str
    senses: tuple[SenseSpec, ...]
    aliases: tuple[str, ...] = ()
    case: CaseRule = "insensitive"
    pos: PartOfSpeech | None = None
    inflect: bool = True


# Inclusive bounds of the per-inventory thresholds: the inventory JSON Schema, the API's
# settings patch and the deployment defaults all read them from here.
REVIEW_THRESHOLD_BOUNDS: tuple[float, float] = (0.0, 1.0)  # a confidence
ABSTAIN_THRESHOLD_BOUNDS: tuple[float, float] = (-1.0, 1.0)  # a cosine similarity

# Accuracy the automatically assigned share must reach, with probability 1 - delta
# (engine/selective.py), and the share of in-inventory occurrences that may be
# flagged as a missing sense (engine/outliers.py). The owners of these defaults.
DEFAULT_TARGET_ACCURACY = 0.95
DEFAULT_TARGET_DELTA = 0.1
DEFAULT_MISSING_SENSE_RATE = 0.05

# Weight of the sentence channel (engine/prototypes.py): each sense's score gains
# weight * cosine(the occurrence's window sentence vector, the sense's sentence
# prototype); 0 turns the channel off (and nothing extra is encoded). The default
# was chosen on held-out domain inventories (docs/measurements.md, "Sentence channel").
DEFAULT_SENTENCE_WEIGHT = 1.0
SENTENCE_WEIGHT_BOUNDS: tuple[float, float] = (0.0, 4.0)


@dataclass(frozen=True)
class InventorySettings:
    """Per-inventory decision settings; the temperature comes from calibration.

    With `target_accuracy` set (the default) the review threshold is chosen from
    the inventory's labels with a guarantee, and `review_threshold` is only the
    floor of the conservative fallback used when labels are too few; None keeps
    the fixed `review_threshold`. `missing_sense_rate` 0 turns missing-sense
    flagging off (the cosine floor `abstain_threshold` still applies).
    `sentence_weight` weighs the sentence channel (whole-window sentence vectors
    against per-sense sentence prototypes) added to each sense's score; 0 is off.
    """

    review_threshold: float = 0.6
    # Cosine under which no sense is assigned; measured on SemCor dev (docs/measurements.md).
    abstain_threshold: float = 0.25
    temperature: float | None = None
    target_accuracy: float | None = DEFAULT_TARGET_ACCURACY
    target_delta: float = DEFAULT_TARGET_DELTA
    missing_sense_rate: float = DEFAULT_MISSING_SENSE_RATE
    alignment_head: str | None = None  # a bundled alignment head's id (engine/alignment.py)
    sentence_weight: float = DEFAULT_SENTENCE_WEIGHT  # the sentence channel's weight


@dataclass(frozen=True)
class InventorySpec:
    """One readable version of an inventory."""

    name: str
    version: int
    terms: tuple[TermSpec, ...]
    settings: InventorySettings = field(default_factory=InventorySettings)
    description: str = ""

    def term(self, term: str) -> TermSpec:
        for spec in self.terms:
            if spec.term == term:
                return spec
        raise KeyError(term)


@dataclass(frozen=True)
class Evidence:
    """A labeled occurrence: `text[start:end]` is the term, `sense_id` its sense."""

    evidence_id: int
    term: str
    sense_id: str
    text: str
    start: int
    end: int
    source: EvidenceSource = "corpus"


@dataclass(frozen=True)
class Document:
    """A document to tag: named text fields (the main one is usually `text`)."""

    doc_id: str
    fields: tuple[tuple[str, str], ...]
    metadata: tuple[tuple[str, Any], ...] = ()

    @classmethod
    def from_text(cls, doc_id: str, text: str, **more_fields: str) -> Document:
        return cls(doc_id=doc_id, fields=(("text", text), *more_fields.items()))


@dataclass(frozen=True)
class Occurrence:
    """A term found in a document field; offsets index the original field text."""

    field: str
    start: int
    end: int
    surface: str
    term: str
    index: int  # position among this document's occurrences, stable across runs
