"""Missing-sense flags: validity of the conformal p-value and the engine's use of it.

Validity (Bates, Candès, Lei, Romano & Sesia 2023, "Testing for outliers with
conformal p-values", and Vovk et al. 2005): for a test score exchangeable with
the n calibration scores, P(p <= a) <= a, and P(p <= a) >= a - 1/(n + 1).
"""

from __future__ import annotations

import numpy as np
import pytest

from service.engine.outliers import MissingSenseModel, conformal_p_value


@pytest.mark.parametrize(("n", "rate"), [(19, 0.05), (60, 0.05), (200, 0.1)])
def test_conformal_p_value_is_valid_for_exchangeable_scores(n, rate):
    rng = np.random.default_rng(11)
    draws = 4000
    flagged = 0
    for _ in range(draws):
        scores = rng.standard_normal(n + 1)
        model = MissingSenseModel(np.sort(scores[:n]), rate)
        flagged += model.flags(model.p_value(float(scores[n])))
    share = flagged / draws
    slack = 3 * np.sqrt(rate * (1 - rate) / draws)
    assert share <= rate + slack
    assert share >= rate - 1 / (n + 1) - slack


def test_p_value_counts_calibration_scores_at_or_above():
    calibration = np.array([0.1, 0.2, 0.2, 0.5])
    model = MissingSenseModel(calibration, 0.05)
    assert model.p_value(0.2) == pytest.approx(conformal_p_value(calibration, 0.2)) == 4 / 5
    assert model.p_value(0.9) == pytest.approx(1 / 5)
    assert model.p_value(0.0) == 1.0


def test_too_few_calibration_scores_never_flag():
    # with n = 10, the smallest possible p-value is 1/11 > 0.05: flagging would be a guess
    model = MissingSenseModel(np.linspace(0, 1, 10), 0.05)
    assert not model.usable
    assert not model.flags(model.p_value(5.0))
    assert MissingSenseModel(np.linspace(0, 1, 19), 0.05).usable


def test_shifted_scores_are_flagged_far_more_often():
    rng = np.random.default_rng(5)
    model = MissingSenseModel(np.sort(rng.standard_normal(200)), 0.05)
    outliers = rng.standard_normal(500) + 3.0
    caught = np.mean([model.flags(model.p_value(float(s))) for s in outliers])
    assert caught > 0.7


# -- the score with the sentence channel -------------------------------------------------


def _distances(glosses: np.ndarray, items: np.ndarray, vector: np.ndarray) -> float:
    gloss = 1.0 - float(np.max(glosses @ vector))
    return gloss + (1.0 - float(np.max(items @ vector)) if len(items) else gloss)


def test_the_sentence_channel_adds_its_weighted_window_distances_to_the_score():
    from service.engine.outliers import occurrence_score
    from service.engine.prototypes import PrototypeBook
    from tests.engine.test_prototypes import CountingEncoder, evidence, with_weight

    items = [evidence(1), evidence(2, "bass.music"), evidence(3)]
    weighted = PrototypeBook.build(CountingEncoder(), with_weight(2.0), items)
    plain = PrototypeBook.build(CountingEncoder(), with_weight(0.0), items)
    probe, window = CountingEncoder._vector("probe"), CountingEncoder._vector("a window")
    token = occurrence_score(plain, "bass", probe)
    assert token == pytest.approx(_distances(
        plain.gloss_vectors("bass"), plain.contextual_items("bass")[0], probe))
    sentence = _distances(weighted.gloss_sentences("bass"),
                          weighted.contextual_sentences("bass"), window)
    assert len(weighted.gloss_sentences("bass")) == 2  # one per gloss of the term
    assert occurrence_score(weighted, "bass", probe, window) == pytest.approx(
        token + 2.0 * sentence)
    with pytest.raises(ValueError, match="sentence"):
        occurrence_score(weighted, "bass", probe)


def test_calibration_scores_leave_each_item_out_of_both_channels():
    from service.engine.outliers import calibration_scores
    from service.engine.prototypes import PrototypeBook
    from tests.engine.test_prototypes import CountingEncoder, evidence, with_weight

    items = [evidence(1), evidence(2, "bass.music"), evidence(3), evidence(4)]
    book = PrototypeBook.build(CountingEncoder(), with_weight(1.0), items)
    vectors = book.contextual_items("bass")[0]
    windows = book.contextual_sentences("bass")
    expected = []
    for j in range(len(vectors)):
        others = np.arange(len(vectors)) != j
        expected.append(
            _distances(book.gloss_vectors("bass"), vectors[others], vectors[j])
            + _distances(book.gloss_sentences("bass"), windows[others], windows[j])
        )
    # "lantern" has no example with the term and no evidence: no calibration item
    np.testing.assert_allclose(calibration_scores(book), np.sort(expected))
