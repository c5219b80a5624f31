"""Decisions: softmax with temperature, statuses, margins, one-sense terms."""

from __future__ import annotations

import numpy as np
import pytest

from service.engine.assignment import DEFAULT_TEMPERATURE, assign, softmax
from service.engine.types import InventorySettings

SETTINGS = InventorySettings(review_threshold=0.6, abstain_threshold=0.3, temperature=0.1)


def test_softmax_is_stable_and_sums_to_one():
    values = softmax(np.array([1000.0, 999.0, 0.0]), 1.0)
    np.testing.assert_allclose(values.sum(), 1.0)
    np.testing.assert_allclose(values[:2], [1 / (1 + np.exp(-1)), np.exp(-1) / (1 + np.exp(-1))])
    with pytest.raises(ValueError):
        softmax(np.array([1.0]), 0.0)


def test_confident_choice_is_assigned_with_sorted_candidates():
    result = assign(np.array([0.4, 0.9, 0.5]), ["a", "b", "c"], SETTINGS)
    expected = softmax(np.array([0.4, 0.9, 0.5]), 0.1)
    assert result.status == "assigned"
    assert result.sense_id == "b"
    assert [c.sense_id for c in result.candidates] == ["b", "c", "a"]
    assert result.confidence == pytest.approx(expected[1])
    assert result.margin == pytest.approx(expected[1] - expected[2])
    assert [c.similarity for c in result.candidates] == pytest.approx([0.9, 0.5, 0.4])


def test_close_call_goes_to_review():
    result = assign(np.array([0.80, 0.78]), ["a", "b"], SETTINGS)
    assert result.status == "review"
    assert result.sense_id == "a"
    assert result.confidence < 0.6


def test_far_from_every_sense_abstains_with_top_probability_as_confidence():
    result = assign(np.array([0.1, 0.25]), ["a", "b"], SETTINGS)
    assert result.status == "abstained"
    assert result.sense_id is None
    assert result.best_sense == "b"
    assert result.confidence == pytest.approx(softmax(np.array([0.1, 0.25]), 0.1)[1])


def test_one_sense_term_is_assigned_with_full_confidence_unless_far_off():
    result = assign(np.array([0.7]), ["only"], SETTINGS)
    assert (result.status, result.sense_id, result.confidence, result.margin) == (
        "assigned",
        "only",
        1.0,
        1.0,
    )
    assert assign(np.array([0.05]), ["only"], SETTINGS).status == "abstained"


def test_temperature_comes_from_settings_then_default():
    sims = np.array([0.6, 0.5])
    fitted = assign(sims, ["a", "b"], SETTINGS)
    default = assign(sims, ["a", "b"], InventorySettings(abstain_threshold=0.0))
    assert fitted.confidence == pytest.approx(softmax(sims, 0.1)[0])
    assert default.confidence == pytest.approx(softmax(sims, DEFAULT_TEMPERATURE)[0])


def test_mismatched_inputs_are_refused():
    with pytest.raises(ValueError):
        assign(np.array([0.5, 0.4]), ["a"], SETTINGS)


def test_sense_prior_enters_the_softmax_as_a_log_offset():
    sims = np.array([0.60, 0.62])
    prior = np.log([0.8, 0.2])
    with_prior = assign(sims, ["a", "b"], SETTINGS, log_prior=prior)
    without = assign(sims, ["a", "b"], SETTINGS)
    assert without.candidates[0].sense_id == "b"
    assert with_prior.candidates[0].sense_id == "a"
    expected = np.exp(sims / 0.1) * [0.8, 0.2]
    assert with_prior.confidence == pytest.approx(expected[0] / expected.sum())
