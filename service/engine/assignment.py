"""Turn an occurrence's similarities to its term's sense prototypes into a decision.

Probabilities are a softmax over cosine similarities divided by a temperature,
plus the log of the sense prior when one is given (see prototypes.py; uniform
without evidence): p(s) ~ prior(s) * exp(cos(s) / T). The temperature is the
inventory's own, fitted by temperature scaling (Guo et al. 2017, see
calibration.py), or DEFAULT_TEMPERATURE, fitted the same way on a SemCor
development slice on the rows assign() sees by default (evidence weight k = 4,
document consistency 0.5, no sense prior; docs/measurements.md). Cosines of
contextual vectors sit in a narrow band, hence a small temperature.

The softmax sees *scores*: the cosines minus each prototype's hubness penalty
(CSLS, see prototypes.py) when the caller passes them, the cosines otherwise.

Status, in order of precedence:
- `abstained`: the occurrence probably carries a sense the inventory lacks:
  the missing-sense test flagged it (a conformal p-value at most the
  inventory's missing_sense_rate, see outliers.py), or its best cosine is
  below abstain_threshold. This applies to one-sense terms too: an occurrence
  far from the only listed sense is exactly the case a curator wants to hear about.
- `review`: the top probability is below the review threshold: the one the
  trust fit chose for the inventory's target accuracy (trust.py) when given,
  else the inventory's review_threshold.
- `assigned` otherwise. A one-sense term that is not abstained is assigned with
  confidence 1.0 and margin 1.0.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .types import InventorySettings, Status

DEFAULT_TEMPERATURE = 0.066
# Cosine below which an occurrence is taken to carry a sense missing from the
# inventory: the largest value that still keeps >= 95 % of SemCor dev occurrences
# whose sense is listed (0.951 with the default scoring). Owned by the inventory
# default in types.py, which every inventory without its own value gets.
RECOMMENDED_ABSTAIN_THRESHOLD = InventorySettings().abstain_threshold


def softmax(
    similarities: np.ndarray, temperature: float, log_prior: np.ndarray | float | None = None
) -> np.ndarray:
    """softmax(similarities / temperature + log_prior) along the last axis, computed stably."""
    if temperature <= 0:
        raise ValueError("temperature must be positive")
    scaled = np.asarray(similarities, np.float64) / temperature
    if log_prior is not None:
        scaled = scaled + np.asarray(log_prior, np.float64)
    scaled -= scaled.max(axis=-1, keepdims=True)
    weights = np.exp(scaled)
    probabilities: np.ndarray = weights / weights.sum(axis=-1, keepdims=True)
    return probabilities


@dataclass(frozen=True)
class Candidate:
    sense_id: str
    similarity: float
    probability: float

    def to_json(self) -> dict[str, object]:
        return {
            "sense_id": self.sense_id,
            "similarity": round(float(self.similarity), 4),
            "probability": round(float(self.probability), 4),
        }


@dataclass(frozen=True)
class Assignment:
    """The decision for one occurrence; sense_id is None when abstained."""

    sense_id: str | None
    confidence: float
    margin: float
    status: Status
    candidates: tuple[Candidate, ...]  # best first
    missing_sense_p: float | None = None  # conformal p-value that the sense is listed

    @property
    def best_sense(self) -> str:
        """The most probable sense even when abstained (for erasure and evaluation)."""
        return self.candidates[0].sense_id


def assign(
    similarities: np.ndarray,
    sense_ids: Sequence[str],
    settings: InventorySettings,
    temperature: float | None = None,
    log_prior: np.ndarray | None = None,
    *,
    scores: np.ndarray | None = None,
    review_threshold: float | None = None,
    missing_sense_p: float | None = None,
    missing_sense: bool = False,
) -> Assignment:
    """Decide among `sense_ids` given their cosine `similarities` to the occurrence
    (and the `scores` the softmax should see, when they differ from the cosines)."""
    similarities = np.asarray(similarities, np.float64).reshape(-1)
    if len(similarities) != len(sense_ids) or not len(sense_ids):
        raise ValueError("one similarity per sense, at least one sense")
    scores = similarities if scores is None else np.asarray(scores, np.float64).reshape(-1)
    if len(scores) != len(similarities):
        raise ValueError("one score per similarity")
    if temperature is None:
        temperature = settings.temperature or DEFAULT_TEMPERATURE
    if review_threshold is None:
        review_threshold = settings.review_threshold
    probabilities = softmax(scores, temperature, log_prior)
    order = np.argsort(-probabilities, kind="stable")
    candidates = tuple(
        Candidate(sense_ids[i], float(similarities[i]), float(probabilities[i])) for i in order
    )
    best = candidates[0]
    confidence = best.probability
    margin = best.probability - candidates[1].probability if len(candidates) > 1 else 1.0
    if missing_sense or float(similarities.max()) < settings.abstain_threshold:
        return Assignment(None, confidence, margin, "abstained", candidates, missing_sense_p)
    status: Status = "review" if confidence < review_threshold else "assigned"
    return Assignment(best.sense_id, confidence, margin, status, candidates, missing_sense_p)
