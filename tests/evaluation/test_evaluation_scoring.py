"""The F1 scorer against hand-worked cases of the unified evaluation framework's rule.

Rule (Raganato, Camacho-Collados & Navigli 2017): an answer is correct when it is
among the instance's gold keys; P = correct / answered, R = correct / total,
F1 = 2PR / (P + R). Several keys for one instance share the credit 1/k
(recalled from memory).
"""

from __future__ import annotations

import pytest

from service.evaluation.scoring import instance_credit, score, score_by_group

GOLD = {
    "d1.t1": {"bank%1:14:00::"},
    "d1.t2": {"bank%1:17:01::", "bank%1:17:00::"},  # two accepted keys
    "d1.t3": {"run%2:38:00::"},
    "d1.t4": {"fast%3:00:01::"},
}


def test_answer_among_several_gold_keys_is_correct_and_unanswered_lowers_recall_only() -> None:
    predictions = {
        "d1.t1": "bank%1:14:00::",  # right
        "d1.t2": "bank%1:17:00::",  # right: the second accepted key
        "d1.t3": "run%2:38:01::",  # wrong
        # d1.t4 unanswered
    }
    result = score(GOLD, predictions)
    # Worked by hand: 2 correct of 3 answered of 4 instances.
    assert result.total == 4
    assert result.answered == 3
    assert result.correct == 2
    assert result.precision == pytest.approx(2 / 3)
    assert result.recall == pytest.approx(1 / 2)
    assert result.f1 == pytest.approx(4 / 7)  # 2 * (2/3) * (1/2) / (2/3 + 1/2)
    assert result.coverage == pytest.approx(3 / 4)


def test_none_and_empty_answers_count_as_unanswered() -> None:
    result = score(GOLD, {"d1.t1": None, "d1.t2": [], "d1.t3": "run%2:38:00::"})
    assert (result.answered, result.correct) == (1, 1)
    assert result.precision == 1.0
    assert result.recall == pytest.approx(1 / 4)
    assert result.f1 == pytest.approx(2 * 1 * 0.25 / 1.25)


def test_all_answered_makes_precision_recall_and_f1_equal() -> None:
    predictions = {
        "d1.t1": "bank%1:14:00::",
        "d1.t2": "bank%1:17:01::",
        "d1.t3": "run%2:38:00::",
        "d1.t4": "fast%3:00:02::",
    }
    result = score(GOLD, predictions)
    assert result.precision == result.recall == result.f1 == pytest.approx(3 / 4)


def test_several_predicted_keys_share_the_credit() -> None:
    assert instance_credit({"a"}, ["a", "b"]) == pytest.approx(0.5)
    assert instance_credit({"a", "b"}, ["a", "b"]) == pytest.approx(1.0)
    assert instance_credit({"a"}, ["a", "a"]) == pytest.approx(1.0)  # repeats count once
    assert instance_credit({"a"}, None) is None
    result = score({"x": {"a"}, "y": {"c"}}, {"x": ["a", "b"], "y": "c"})
    assert result.correct == pytest.approx(1.5)
    assert result.precision == pytest.approx(0.75)


def test_nothing_answered_scores_zero_without_dividing_by_zero() -> None:
    result = score(GOLD, {})
    assert (result.precision, result.recall, result.f1) == (0.0, 0.0, 0.0)


def test_prediction_for_an_unknown_instance_is_an_error() -> None:
    with pytest.raises(ValueError, match="not gold instances"):
        score(GOLD, {"d9.t9": "bank%1:14:00::"})


def test_scores_per_part_of_speech() -> None:
    pos = {"d1.t1": "n", "d1.t2": "n", "d1.t3": "v", "d1.t4": "a"}
    predictions = {"d1.t1": "bank%1:14:00::", "d1.t2": "bank%1:06:00::", "d1.t3": "run%2:38:00::"}
    by_pos = score_by_group(GOLD, predictions, pos)
    assert list(by_pos) == ["a", "n", "v"]
    assert by_pos["n"].f1 == pytest.approx(0.5)
    assert by_pos["v"].f1 == pytest.approx(1.0)
    assert by_pos["a"].answered == 0 and by_pos["a"].f1 == 0.0
