"""A review threshold with a finite-sample accuracy guarantee.

Given cross-fitted (confidence, correct) pairs of labeled items, choose the
lowest confidence threshold t such that, with probability at least 1 - delta
over the labeled sample, the accuracy of occurrences with confidence >= t is
at least the target. Learn-then-Test (Angelopoulos, Bates, Candès, Jordan &
Lei 2021) with fixed-sequence testing: a fixed grid of thresholds
(CANDIDATE_THRESHOLDS) is visited from the strictest down; at each, H0
"accuracy of the selected items < target" is tested with the exact binomial
tail of the errors among the n selected (the risk bound of selective
classification with guaranteed risk, Geifman & El-Yaniv 2017); the walk stops
at the first test that fails, and the last threshold that passed is returned.
Fixed-sequence testing controls the
family-wise error at delta without splitting it between thresholds.

Fixed-sequence testing stops at the first failure, so the walk starts where a
test has power: at the first threshold selecting `design_size` items, the fewest for which
a sample with half the tolerated error rate would pass (77 for target 0.95,
delta 0.1), or at all items when there are fewer. That start depends on the
number of labels and the confidences only, not on which items are right, so the
guarantee holds conditionally on the confidences. When no threshold passes
there are too few labels: the result says so and falls back to a conservative
threshold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.stats import binom

from .types import DEFAULT_TARGET_ACCURACY
from .types import DEFAULT_TARGET_DELTA as DEFAULT_DELTA

# The thresholds tested, strictest first: fixed before seeing any data, as
# fixed-sequence testing requires; 0.005 apart, so a threshold loses little.
CANDIDATE_THRESHOLDS = np.round(np.arange(0.995, 0.0, -0.005), 3)


def minimum_selected(target_accuracy: float, delta: float) -> int:
    """The fewest selected items that can certify the target: all right and target^n <= delta."""
    if not 0 < target_accuracy < 1 or not 0 < delta < 1:
        raise ValueError("target accuracy and delta must lie in (0, 1)")
    return math.ceil(math.log(delta) / math.log(target_accuracy))


def design_size(target_accuracy: float, delta: float) -> int:
    """Fewest items for which half the tolerated error rate would pass the test."""
    size = minimum_selected(target_accuracy, delta)
    while binomial_p_value(int(size * (1 - target_accuracy) / 2), size, target_accuracy) > delta:
        size += 1
    return size


def binomial_p_value(errors: int, selected: int, target_accuracy: float) -> float:
    """P(X <= errors), X ~ Binomial(selected, 1 - target): small when the error rate
    is credibly below 1 - target (a valid p-value for H0: error rate >= 1 - target)."""
    return float(binom.cdf(errors, selected, 1.0 - target_accuracy))


@dataclass(frozen=True)
class SelectiveThreshold:
    """The chosen review threshold and what stands behind it."""

    threshold: float
    guaranteed: bool  # False: too few labels, `threshold` is the conservative fallback
    target_accuracy: float
    delta: float
    labels: int  # cross-fitted labeled items behind the choice
    needed: int  # selected items a certificate needs at the least
    coverage: float  # share of labeled items at or above the threshold
    selected_accuracy: float | None  # their accuracy (None when none selected)

    @property
    def expected_review_share(self) -> float:
        return 1.0 - self.coverage

    def to_json(self) -> dict[str, object]:
        return {
            "threshold": round(self.threshold, 6),
            "guaranteed": self.guaranteed,
            "target_accuracy": self.target_accuracy,
            "delta": self.delta,
            "labels": self.labels,
            "labels_needed": self.needed,
            "expected_review_share": round(self.expected_review_share, 6),
            "selected_accuracy": (
                None if self.selected_accuracy is None else round(self.selected_accuracy, 6)
            ),
        }


def choose_threshold(
    confidence: np.ndarray,
    correct: np.ndarray,
    target_accuracy: float = DEFAULT_TARGET_ACCURACY,
    delta: float = DEFAULT_DELTA,
    fallback: float | None = None,
) -> SelectiveThreshold:
    """The lowest threshold certified by fixed-sequence binomial tests (module docstring).

    `fallback` (default: the target itself, which a calibrated confidence reads as
    "each assigned item at least this likely right") applies when nothing passes.
    """
    confidence = np.asarray(confidence, np.float64).reshape(-1)
    correct = np.asarray(correct, bool).reshape(-1)
    if len(confidence) != len(correct):
        raise ValueError("one correctness flag per confidence")
    needed = minimum_selected(target_accuracy, delta)
    fallback = target_accuracy if fallback is None else fallback
    n = len(confidence)
    start = max(needed, min(n, design_size(target_accuracy, delta)))
    chosen: float | None = None
    for threshold in CANDIDATE_THRESHOLDS:
        above = confidence >= threshold
        selected = int(above.sum())
        if selected < start:
            continue
        errors = int(selected - correct[above].sum())
        if binomial_p_value(errors, selected, target_accuracy) > delta:
            break
        chosen = float(threshold)
    if chosen is None:
        return selection_at(fallback, confidence, correct, False, target_accuracy, delta, needed)
    return selection_at(chosen, confidence, correct, True, target_accuracy, delta, needed)


def selection_at(
    threshold: float,
    confidence: np.ndarray,
    correct: np.ndarray,
    guaranteed: bool,
    target_accuracy: float,
    delta: float,
    needed: int,
) -> SelectiveThreshold:
    """What the labels say about assigning at `threshold` (coverage, accuracy)."""
    confidence = np.asarray(confidence, np.float64).reshape(-1)
    correct = np.asarray(correct, bool).reshape(-1)
    above = confidence >= threshold
    n = len(confidence)
    return SelectiveThreshold(
        threshold=float(threshold),
        guaranteed=guaranteed,
        target_accuracy=target_accuracy,
        delta=delta,
        labels=n,
        needed=needed,
        coverage=float(above.mean()) if n else 0.0,
        selected_accuracy=float(correct[above].mean()) if above.any() else None,
    )
