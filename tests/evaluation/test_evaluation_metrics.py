"""Classification metrics checked against scikit-learn, and the review-threshold curve."""

from __future__ import annotations

import random

import pytest
from sklearn.metrics import accuracy_score, precision_recall_fscore_support
from sklearn.metrics import confusion_matrix as sk_confusion_matrix

from service.evaluation.metrics import (
    accuracy,
    confusion_matrix,
    coverage_curve,
    label_scores,
    threshold_for_accuracy,
)

NO_ANSWER = "<none>"  # scikit-learn needs a string where we use None


def _random_case(seed: int) -> tuple[list[str], list[str | None], list[str]]:
    rng = random.Random(seed)
    labels = [f"s{i}" for i in range(rng.randint(2, 6))]
    n = rng.randint(1, 60)
    gold = [rng.choice(labels) for _ in range(n)]
    predicted: list[str | None] = [
        None if rng.random() < 0.1 else rng.choice([*labels, "other"]) for _ in range(n)
    ]
    return gold, predicted, labels


@pytest.mark.parametrize("seed", range(25))
def test_label_scores_match_scikit_learn(seed: int) -> None:
    gold, predicted, labels = _random_case(seed)
    ours = label_scores(gold, predicted, labels)
    as_strings = [NO_ANSWER if p is None else p for p in predicted]
    # Reference: sklearn.metrics.precision_recall_fscore_support, one value per label.
    precision, recall, f1, support = precision_recall_fscore_support(
        gold, as_strings, labels=labels, average=None, zero_division=0
    )
    for i, score in enumerate(ours):
        assert score.label == labels[i]
        assert score.precision == pytest.approx(precision[i])
        assert score.recall == pytest.approx(recall[i])
        assert score.f1 == pytest.approx(f1[i])
        assert score.support == support[i]


@pytest.mark.parametrize("seed", range(25))
def test_confusion_matrix_and_accuracy_match_scikit_learn(seed: int) -> None:
    gold, predicted, labels = _random_case(seed)
    as_strings = [NO_ANSWER if p is None else p for p in predicted]
    # Reference: sklearn.metrics.confusion_matrix with the same label order.
    expected = sk_confusion_matrix(gold, as_strings, labels=labels).tolist()
    assert confusion_matrix(gold, predicted, labels) == expected
    assert accuracy(gold, predicted) == pytest.approx(accuracy_score(gold, as_strings))


def test_coverage_curve_by_hand() -> None:
    confidences = [0.9, 0.8, 0.8, 0.6, 0.3]
    correct = [True, True, False, True, False]
    curve = coverage_curve(confidences, correct)
    # Tied confidences enter together: thresholds 0.9, 0.8, 0.6, 0.3.
    assert [p.threshold for p in curve] == [0.9, 0.8, 0.6, 0.3]
    assert [p.assigned for p in curve] == [1, 3, 4, 5]
    assert [p.coverage for p in curve] == pytest.approx([0.2, 0.6, 0.8, 1.0])
    assert [p.accuracy for p in curve] == pytest.approx([1.0, 2 / 3, 3 / 4, 3 / 5])
    chosen = threshold_for_accuracy(curve, 0.75)
    assert chosen is not None and chosen.threshold == 0.6 and chosen.coverage == 0.8
    assert threshold_for_accuracy(curve, 0.5).threshold == 0.3  # everything assigned
    assert threshold_for_accuracy(coverage_curve([0.5], [False]), 0.9) is None


def test_lengths_must_agree() -> None:
    with pytest.raises(ValueError):
        accuracy(["a"], ["a", "b"])
    with pytest.raises(ValueError):
        coverage_curve([0.5], [True, False])
