"""The trust fit on an inventory's own labels: temperature, guaranteed threshold,
missing-sense flags, and the guarded calibration that `whichsense calibrate` stores."""

from __future__ import annotations

import numpy as np

from service.engine import calibration
from service.engine.calibration import calibration_rows, propose_calibration
from service.engine.prototypes import PrototypeBook
from service.engine.trust import fit_trust
from service.engine.types import InventorySettings
from tests.engine.test_calibration import book_with_evidence

CENTRES = {"f": np.array([1.0, 0.15, 0.2]), "m": np.array([0.15, 1.0, 0.2])}


def labeled_book(count: int, seed: int, noise: float = 0.3) -> PrototypeBook:
    rng = np.random.default_rng(seed)
    senses = ["f" if i % 2 else "m" for i in range(count)]
    vectors = np.stack([CENTRES[s] + rng.normal(scale=noise, size=3) for s in senses])
    vectors /= np.linalg.norm(vectors, axis=1, keepdims=True)
    return book_with_evidence(vectors, senses)


def test_many_clean_labels_certify_the_target_and_fit_a_temperature():
    fit = fit_trust(labeled_book(400, 1, noise=0.2), InventorySettings())
    assert fit.temperature_source == "fitted"
    assert fit.shortfall is None
    assert fit.review.guaranteed
    assert fit.review.selected_accuracy is not None and fit.review.selected_accuracy >= 0.95
    assert 0 <= fit.review.expected_review_share < 0.5
    assert fit.missing.usable and fit.missing.labels == 400


def test_few_labels_fall_back_to_a_conservative_threshold_and_say_so():
    fit = fit_trust(labeled_book(12, 2), InventorySettings(review_threshold=0.6))
    assert fit.temperature_source == "default"
    assert not fit.review.guaranteed
    assert fit.review.threshold == 0.95  # max(review_threshold, target_accuracy)
    assert fit.shortfall is not None and "12 labeled items" in fit.shortfall
    assert fit.to_json()["too_few_labels"] == fit.shortfall


def test_a_stored_temperature_and_a_fixed_threshold_are_respected():
    settings = InventorySettings(review_threshold=0.7, temperature=0.2, target_accuracy=None)
    fit = fit_trust(labeled_book(100, 3), settings)
    assert fit.temperature == 0.2 and fit.temperature_source == "inventory"
    assert fit.review.threshold == 0.7 and not fit.review.guaranteed


def test_a_vector_far_from_every_label_gets_a_small_p_value():
    book = labeled_book(200, 4)
    fit = fit_trust(book, InventorySettings())
    from service.engine.outliers import occurrence_score

    stranger = np.array([0.0, 0.0, 1.0])
    usual = CENTRES["f"] / np.linalg.norm(CENTRES["f"])
    assert fit.missing.flags(fit.missing.p_value(occurrence_score(book, "bass", stranger)))
    assert not fit.missing.flags(fit.missing.p_value(occurrence_score(book, "bass", usual)))


def test_calibration_is_refused_from_too_few_labels():
    proposal = propose_calibration(labeled_book(10, 5), current_temperature=0.066)
    assert not proposal.accepted and proposal.temperature is None
    assert "at least 30" in (proposal.refused or "")


def test_calibration_is_accepted_when_it_helps_held_out_error():
    proposal = propose_calibration(labeled_book(300, 6), current_temperature=5.0)
    assert proposal.accepted
    assert proposal.ece_after is not None and proposal.ece_before is not None
    assert proposal.ece_after < proposal.ece_before


def test_a_fit_that_worsens_held_out_calibration_is_refused(monkeypatch):
    book = labeled_book(300, 7)
    rows = calibration_rows(book)
    good = calibration.fit_temperature(rows.scores, rows.gold)
    # a fitting routine gone wrong (far too sharp): the guard must catch it
    monkeypatch.setattr(calibration, "fit_temperature", lambda *a, **k: good / 50)
    proposal = propose_calibration(book, current_temperature=good)
    assert not proposal.accepted
    assert "worse" in (proposal.refused or "")
    assert proposal.ece_after is not None and proposal.ece_before is not None
    assert proposal.ece_after > proposal.ece_before


def test_held_out_rows_equal_rebuilding_the_book_without_the_item():
    # cross-fitting: an item's row is what a book that never saw it would score
    rng = np.random.default_rng(8)
    senses = ["f", "m", "f", "m", "f", "m", "m"]
    vectors = np.stack([CENTRES[s] + rng.normal(scale=0.3, size=3) for s in senses])
    vectors /= np.linalg.norm(vectors, axis=1, keepdims=True)

    def build(keep: list[int]) -> PrototypeBook:
        return book_with_evidence(vectors[keep], [senses[i] for i in keep])

    rows = build(list(range(len(senses)))).held_out_rows()
    assert [row.gold for row in rows] == [0 if s == "f" else 1 for s in senses]
    for i, row in enumerate(rows):
        rebuilt = build([j for j in range(len(senses)) if j != i])
        similarities = rebuilt.similarities("bass", vectors[i])[0]
        np.testing.assert_allclose(row.similarities, similarities, atol=1e-5)
        np.testing.assert_allclose(row.scores, rebuilt.scores("bass", similarities), atol=1e-5)
