"""Temperature scaling, NLL, ECE and reliability bins, against scikit-learn where it has one."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.calibration import calibration_curve

from service.engine.assignment import softmax
from service.engine.calibration import (
    calibrate_book,
    confidences_and_hits,
    expected_calibration_error,
    fit_temperature,
    leave_one_out_similarities,
    negative_log_likelihood,
    reliability_bins,
)
from service.engine.prototypes import PrototypeBook
from service.engine.types import Evidence, InventorySettings, InventorySpec, SenseSpec, TermSpec

TRUE_TEMPERATURE = 0.05


def synthetic(count: int, seed: int) -> tuple[list[np.ndarray], list[int]]:
    """Cosine-like similarity rows whose labels are drawn from softmax(s / 0.05)."""
    rng = np.random.default_rng(seed)
    rows, gold = [], []
    for _ in range(count):
        row = rng.uniform(0.5, 0.9, size=rng.integers(2, 7))
        rows.append(row)
        gold.append(int(rng.choice(len(row), p=softmax(row, TRUE_TEMPERATURE))))
    return rows, gold


def test_nll_matches_its_definition():
    rows = [np.array([0.2, 0.8]), np.array([0.5, 0.1, 0.3])]
    gold = [1, 2]
    expected = -np.mean([np.log(softmax(rows[0], 0.5)[1]), np.log(softmax(rows[1], 0.5)[2])])
    assert negative_log_likelihood(rows, gold, 0.5) == pytest.approx(expected)


def test_fit_recovers_the_temperature_that_generated_the_labels():
    rows, gold = synthetic(4000, seed=1)
    assert fit_temperature(rows, gold) == pytest.approx(TRUE_TEMPERATURE, rel=0.15)


def test_temperature_scaling_lowers_nll_and_ece_on_held_out_labels():
    # Guo et al. 2017: one temperature fitted on held-out data repairs over-confidence.
    fit_rows, fit_gold = synthetic(2000, seed=2)
    test_rows, test_gold = synthetic(2000, seed=3)
    overconfident = 0.01
    fitted = fit_temperature(fit_rows, fit_gold)
    assert negative_log_likelihood(test_rows, test_gold, fitted) < negative_log_likelihood(
        test_rows, test_gold, overconfident
    )
    before = expected_calibration_error(*confidences_and_hits(test_rows, test_gold, overconfident))
    after = expected_calibration_error(*confidences_and_hits(test_rows, test_gold, fitted))
    assert after < before
    assert after < 0.05


def test_ece_agrees_with_a_reference_built_on_scikit_learn_calibration_curve():
    # Reference: sklearn.calibration.calibration_curve(strategy="uniform") gives per-bin accuracy
    # and mean confidence of the non-empty bins; ECE weights each gap by the bin's share.
    rng = np.random.default_rng(4)
    confidence = rng.uniform(0, 1, size=3000) ** 0.5
    hit = rng.uniform(size=3000) < confidence**1.5
    for n_bins in (5, 10, 15):
        accuracy, mean_confidence = calibration_curve(
            hit, confidence, n_bins=n_bins, strategy="uniform"
        )
        edges = np.linspace(0.0, 1.0, n_bins + 1)
        counts = np.bincount(np.searchsorted(edges[1:-1], confidence), minlength=n_bins)
        counts = counts[counts > 0]
        reference = float(np.sum(counts / len(hit) * np.abs(accuracy - mean_confidence)))
        assert expected_calibration_error(confidence, hit, n_bins) == pytest.approx(reference)


def test_reliability_bins_cover_every_instance():
    confidence = np.array([0.0, 0.05, 0.1, 0.55, 0.999, 1.0])
    hit = np.array([0, 1, 1, 0, 1, 1], bool)
    bins = reliability_bins(confidence, hit, n_bins=10)
    assert sum(b.count for b in bins) == len(confidence)
    assert bins[0].count == 3  # 0.0, 0.05 and 0.1 fall in (0, 0.1] (0 joins the first bin)
    assert bins[-1].count == 2 and bins[-1].accuracy == 1.0


class FixedEncoder:
    """Glosses along two axes; evidence vectors are passed in, so nothing else is encoded."""

    model_id = "fixed"
    dimension = 3

    def encode_spans(self, spans):
        raise AssertionError("evidence vectors are precomputed in this test")

    def encode_glosses(self, glosses):
        axes = {"fish": [1.0, 0.0, 0.0], "music": [0.0, 1.0, 0.0]}
        return np.array([axes[g] for _, g, _ in glosses], np.float32)


def book_with_evidence(vectors: np.ndarray, senses: list[str]) -> PrototypeBook:
    inventory = InventorySpec(
        "loo", 1, (TermSpec("bass", (SenseSpec("f", "fish"), SenseSpec("m", "music"))),),
        settings=InventorySettings(sentence_weight=0.0),  # the token channel alone
    )
    evidence = [
        Evidence(i, "bass", sense, "a bass", 2, 6) for i, sense in enumerate(senses, start=1)
    ]
    return PrototypeBook.build(FixedEncoder(), inventory, evidence, evidence_vectors=vectors)


def test_leave_one_out_equals_rebuilding_without_the_item():
    rng = np.random.default_rng(5)
    vectors = rng.normal(size=(6, 3))
    vectors /= np.linalg.norm(vectors, axis=1, keepdims=True)
    senses = ["f", "f", "m", "m", "f", "m"]
    book = book_with_evidence(vectors, senses)
    rows, gold, priors = leave_one_out_similarities(book, sense_prior=True)
    assert gold == [0 if s == "f" else 1 for s in senses]
    # The prior is off by default, as in the Disambiguator: rows are the same, priors zero.
    plain_rows, _, plain_priors = leave_one_out_similarities(book)
    np.testing.assert_allclose(plain_rows, rows)
    assert all(not p.any() for p in plain_priors)
    for i in range(6):
        keep = [j for j in range(6) if j != i]
        rebuilt = book_with_evidence(vectors[keep], [senses[j] for j in keep])
        np.testing.assert_allclose(rows[i], rebuilt.matrix("bass") @ vectors[i], atol=1e-6)
        np.testing.assert_allclose(priors[i], rebuilt.log_prior("bass"), atol=1e-12)


def test_calibrating_a_book_from_its_own_labels():
    rng = np.random.default_rng(6)
    centres = {"f": np.array([1.0, 0.2, 0.3]), "m": np.array([0.2, 1.0, 0.3])}
    senses = ["f", "m"] * 40
    vectors = np.stack([centres[s] + rng.normal(scale=0.35, size=3) for s in senses])
    vectors /= np.linalg.norm(vectors, axis=1, keepdims=True)
    report = calibrate_book(book_with_evidence(vectors, senses), default_temperature=0.01)
    assert report.instances == 80
    assert report.nll_after < report.nll_before
    assert report.temperature > 0.01
    assert 0.5 < report.accuracy <= 1.0


def test_fit_with_sense_priors_recovers_the_generating_temperature():
    rng = np.random.default_rng(7)
    rows, gold, priors = [], [], []
    for _ in range(4000):
        row = rng.uniform(0.5, 0.9, size=3)
        prior = np.log(rng.dirichlet(np.ones(3)))
        rows.append(row)
        priors.append(prior)
        gold.append(int(rng.choice(3, p=softmax(row, TRUE_TEMPERATURE, prior))))
    assert fit_temperature(rows, gold, log_priors=priors) == pytest.approx(
        TRUE_TEMPERATURE, rel=0.15
    )
    assert negative_log_likelihood(rows, gold, TRUE_TEMPERATURE, priors) < (
        negative_log_likelihood(rows, gold, TRUE_TEMPERATURE)
    )
