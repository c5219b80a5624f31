"""F1 as the unified evaluation framework for English all-words WSD scores it.

Raganato, Camacho-Collados & Navigli (2017), "Word Sense Disambiguation: A
Unified Evaluation Framework and Empirical Comparison": an answer is correct
when it is among the instance's gold keys; precision = correct / answered,
recall = correct / all gold instances, F1 their harmonic mean. An instance
left unanswered lowers recall only. When a system gives several keys for one
instance, the framework's scorer splits the credit: each given key is worth
1/k (recalled from memory).
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Collection, Mapping
from dataclasses import dataclass

Answer = str | Collection[str] | None


@dataclass(frozen=True)
class F1Score:
    total: int  # gold instances
    answered: int  # instances with at least one predicted key
    correct: float  # credit earned (fractional when several keys are given)

    @property
    def precision(self) -> float:
        return self.correct / self.answered if self.answered else 0.0

    @property
    def recall(self) -> float:
        return self.correct / self.total if self.total else 0.0

    @property
    def f1(self) -> float:
        p, r = self.precision, self.recall
        return 2 * p * r / (p + r) if p + r > 0 else 0.0

    @property
    def coverage(self) -> float:
        return self.answered / self.total if self.total else 0.0

    def to_json(self) -> dict[str, float | int]:
        return {
            "n": self.total,
            "answered": self.answered,
            "correct": round(self.correct, 6),
            "precision": round(self.precision, 6),
            "recall": round(self.recall, 6),
            "f1": round(self.f1, 6),
            "coverage": round(self.coverage, 6),
        }


def _keys(answer: Answer) -> list[str]:
    if answer is None:
        return []
    if isinstance(answer, str):
        return [answer]
    return list(dict.fromkeys(answer))


def instance_credit(gold: Collection[str], answer: Answer) -> float | None:
    """Credit for one instance: None if unanswered, else share of given keys that are gold."""
    given = _keys(answer)
    if not given:
        return None
    return sum(1 for key in given if key in gold) / len(given)


def score(gold: Mapping[str, Collection[str]], predictions: Mapping[str, Answer]) -> F1Score:
    """Precision, recall and F1 of `predictions` (instance id -> key(s)) against `gold`.

    Predictions for ids that are not gold instances are an error, as in the
    framework's scorer: they usually mean the files do not match.
    """
    unknown = [instance for instance in predictions if instance not in gold]
    if unknown:
        raise ValueError(
            f"{len(unknown)} predicted ids are not gold instances, e.g. {unknown[0]!r}"
        )
    answered = 0
    correct = 0.0
    for instance, keys in gold.items():
        credit = instance_credit(keys, predictions.get(instance))
        if credit is not None:
            answered += 1
            correct += credit
    return F1Score(total=len(gold), answered=answered, correct=correct)


def score_by_group(
    gold: Mapping[str, Collection[str]],
    predictions: Mapping[str, Answer],
    group_of: Mapping[str, str],
) -> dict[str, F1Score]:
    """One score per group (e.g. part of speech), groups in sorted order."""
    groups: dict[str, dict[str, Collection[str]]] = defaultdict(dict)
    for instance, keys in gold.items():
        groups[group_of[instance]][instance] = keys
    return {
        name: score(members, {i: predictions[i] for i in members if i in predictions})
        for name, members in sorted(groups.items())
    }
