"""The review threshold's guarantee, checked on synthetic scores with known accuracy.

Method: Learn-then-Test with fixed-sequence binomial tests (Angelopoulos, Bates,
Candès, Jordan & Lei 2021, "Learn then Test: calibrating predictive algorithms
to achieve risk control"), the binomial risk bound of Geifman & El-Yaniv 2017
("Selective classification for deep neural networks", SGR). The promise: over
draws of the labeled sample, the true accuracy of what the chosen threshold
assigns falls below the target in at most delta of the draws.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.engine.selective import binomial_p_value, choose_threshold, minimum_selected


def synthetic(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Calibrated confidences uniform on [0.4, 1]: an item is right with probability c,
    so the true accuracy above a threshold t is (1 + t) / 2 (closed form)."""
    confidence = rng.uniform(0.4, 1.0, n)
    correct = rng.random(n) < confidence
    return confidence, correct


def true_accuracy_above(t: float) -> float:
    """E[c | c >= t] for c ~ U(0.4, 1)."""
    return (1 + max(t, 0.4)) / 2


@pytest.mark.parametrize(("n", "target", "delta"), [(400, 0.9, 0.1), (3000, 0.95, 0.05)])
def test_realised_accuracy_falls_below_target_in_at_most_delta_of_draws(n, target, delta):
    rng = np.random.default_rng(7)
    draws, failures, guaranteed = 400, 0, 0
    for _ in range(draws):
        chosen = choose_threshold(*synthetic(rng, n), target, delta)
        if not chosen.guaranteed:
            continue
        guaranteed += 1
        if true_accuracy_above(chosen.threshold) < target:
            failures += 1
    assert guaranteed > draws * 0.5  # the test has power at these sizes
    # binomial slack of three standard errors around delta
    assert failures / guaranteed <= delta + 3 * math.sqrt(delta * (1 - delta) / guaranteed)


def test_the_threshold_is_not_needlessly_strict():
    # with 4000 labels the certified threshold comes close to the oracle one
    rng = np.random.default_rng(3)
    chosen = choose_threshold(*synthetic(rng, 4000), 0.9, 0.1)
    grid = np.linspace(0.4, 0.99, 2000)
    oracle = grid[np.argmax([true_accuracy_above(t) >= 0.9 for t in grid])]
    assert chosen.guaranteed
    assert oracle <= chosen.threshold <= oracle + 0.08
    assert chosen.expected_review_share == pytest.approx(1 - chosen.coverage)


def test_too_few_labels_fall_back_and_say_so():
    needed = minimum_selected(0.95, 0.1)
    assert needed == 45  # 0.95^45 = 0.0994 <= 0.1 < 0.95^44
    confidence = np.linspace(0.5, 1.0, needed - 1)
    chosen = choose_threshold(confidence, np.ones(needed - 1, bool), 0.95, 0.1, fallback=0.97)
    assert not chosen.guaranteed
    assert chosen.threshold == 0.97
    assert chosen.labels == needed - 1 and chosen.needed == needed


def test_binomial_p_value_matches_the_closed_form():
    # zero errors among n: P(X <= 0) = target^n
    assert binomial_p_value(0, 20, 0.9) == pytest.approx(0.9**20)
    assert binomial_p_value(20, 20, 0.9) == pytest.approx(1.0)


def test_all_right_labels_certify_everything():
    confidence = np.linspace(0.4, 0.99, 200)
    chosen = choose_threshold(confidence, np.ones(200, bool), 0.95, 0.1)
    assert chosen.guaranteed and chosen.threshold <= 0.4 and chosen.coverage == 1.0
    assert chosen.selected_accuracy == 1.0
