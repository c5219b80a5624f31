"""One-sense-per-discourse sharing (Gale, Church & Yarowsky 1992), without forcing one sense."""

from __future__ import annotations

import numpy as np
import pytest

from service.engine.consistency import share_within_documents


def test_rows_mix_with_their_group_mean():
    rows = [np.array([0.8, 0.6]), np.array([0.5, 0.7]), np.array([0.1, 0.9])]
    groups = [("d1", "bass"), ("d1", "bass"), ("d2", "bass")]
    mixed = share_within_documents(rows, groups, weight=0.4)
    mean = (rows[0] + rows[1]) / 2
    np.testing.assert_allclose(mixed[0], 0.6 * rows[0] + 0.4 * mean)
    np.testing.assert_allclose(mixed[1], 0.6 * rows[1] + 0.4 * mean)
    np.testing.assert_allclose(mixed[2], rows[2])  # alone in its document


def test_weak_context_borrows_but_a_clear_one_keeps_its_sense():
    rows = [np.array([0.90, 0.60]), np.array([0.90, 0.62]), np.array([0.70, 0.71]),
            np.array([0.55, 0.95])]
    mixed = share_within_documents(rows, ["d"] * 4, weight=0.3)
    assert int(np.argmax(rows[2])) == 1 and int(np.argmax(mixed[2])) == 0  # ambiguous: follows
    assert int(np.argmax(mixed[3])) == 1  # clearly different: keeps its own sense


def test_weight_zero_changes_nothing_and_bad_weights_are_refused():
    rows = [np.array([0.3, 0.2]), np.array([0.1, 0.4])]
    for before, after in zip(rows, share_within_documents(rows, ["d", "d"], 0.0), strict=True):
        np.testing.assert_allclose(before, after)
    with pytest.raises(ValueError):
        share_within_documents(rows, ["d", "d"], 1.5)
