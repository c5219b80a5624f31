"""Classification metrics for labeled occurrences, and the review-threshold trade-off.

Plain Python over lists so the report needs no numeric library to explain a
figure; the definitions follow scikit-learn's (`precision_recall_fscore_support`
with `zero_division=0`, `confusion_matrix`), and the tests check them against it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class LabelScore:
    label: str
    precision: float
    recall: float
    f1: float
    support: int

    def to_json(self) -> dict[str, float | int | str]:
        return {
            "label": self.label,
            "precision": round(self.precision, 6),
            "recall": round(self.recall, 6),
            "f1": round(self.f1, 6),
            "support": self.support,
        }


def accuracy(gold: Sequence[str], predicted: Sequence[str | None]) -> float:
    """Share of items whose prediction equals the gold label (no answer counts as wrong)."""
    if len(gold) != len(predicted):
        raise ValueError("gold and predicted differ in length")
    return sum(g == p for g, p in zip(gold, predicted, strict=True)) / len(gold) if gold else 0.0


def label_scores(
    gold: Sequence[str], predicted: Sequence[str | None], labels: Sequence[str]
) -> list[LabelScore]:
    """Precision, recall, F1 and support of each label in `labels`, in that order."""
    scores = []
    for label in labels:
        true_positive = sum(g == label and p == label for g, p in zip(gold, predicted, strict=True))
        predicted_as = sum(p == label for p in predicted)
        support = sum(g == label for g in gold)
        precision = true_positive / predicted_as if predicted_as else 0.0
        recall = true_positive / support if support else 0.0
        f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
        scores.append(LabelScore(label, precision, recall, f1, support))
    return scores


def confusion_matrix(
    gold: Sequence[str], predicted: Sequence[str | None], labels: Sequence[str]
) -> list[list[int]]:
    """Rows: gold label; columns: predicted label; items outside `labels` are left out."""
    position = {label: index for index, label in enumerate(labels)}
    matrix = [[0] * len(labels) for _ in labels]
    for g, p in zip(gold, predicted, strict=True):
        if g in position and p in position:
            matrix[position[g]][position[p]] += 1
    return matrix


@dataclass(frozen=True)
class CoveragePoint:
    """Assign automatically when confidence >= threshold; the rest goes to review."""

    threshold: float
    coverage: float  # share assigned automatically
    accuracy: float  # accuracy among those assigned
    assigned: int


def coverage_curve(confidences: Sequence[float], correct: Sequence[bool]) -> list[CoveragePoint]:
    """One point per distinct confidence, from the strictest threshold to the loosest."""
    if len(confidences) != len(correct):
        raise ValueError("confidences and correct differ in length")
    ranked = sorted(zip(confidences, correct, strict=True), key=lambda pair: -pair[0])
    points: list[CoveragePoint] = []
    right = 0
    total = len(ranked)
    for index, (confidence, ok) in enumerate(ranked):
        right += ok
        is_last_of_tie = index + 1 == total or ranked[index + 1][0] < confidence
        if is_last_of_tie:
            assigned = index + 1
            points.append(CoveragePoint(confidence, assigned / total, right / assigned, assigned))
    return points


def threshold_for_accuracy(curve: Sequence[CoveragePoint], target: float) -> CoveragePoint | None:
    """The loosest threshold whose assigned share is at least `target` accurate, or None."""
    reaching = [point for point in curve if point.accuracy >= target]
    return max(reaching, key=lambda point: point.coverage) if reaching else None
