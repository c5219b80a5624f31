"""The benchmark's scoring on a hand-computed example (no encoder, no WordNet).

F1 follows the unified evaluation framework of Raganato, Camacho-Collados & Navigli
(2017): an answer is right when it is among the gold keys, P = right / answered,
R = right / all instances, F1 their harmonic mean.
"""

from __future__ import annotations

import numpy as np
import pytest

from service.evaluation.benchmark import (
    EngineDecisions,
    EngineOptions,
    Instance,
    _confidences,
    engine_decisions,
    f1_table,
    fit_engine_temperature,
    window_lookup,
)


def _instance(name: str, pos: str, gold: tuple[str, ...]) -> Instance:
    return Instance(name, "d1", "a text", 0, 1, "lemma", pos, gold)  # type: ignore[arg-type]


INSTANCES = [
    _instance("i1", "n", ("a%1",)),
    _instance("i2", "n", ("b%1", "c%1")),  # two gold keys: either counts
    _instance("i3", "v", ("d%2",)),
    _instance("i4", "v", ("e%2",)),  # left unanswered (no candidates)
]


def test_f1_by_hand() -> None:
    # i1 right, i2 right (second gold key), i3 wrong, i4 unanswered:
    # P = 2/3, R = 2/4, F1 = 2PR/(P+R) = (2 * 2/3 * 1/2) / (2/3 + 1/2) = 4/7.
    decisions = EngineDecisions(
        candidates=[["a%1", "x%1"], ["b%1", "c%1"], ["d%2", "y%2"], []],
        similarities=[np.zeros(2), np.zeros(2), np.zeros(2), np.zeros(0)],
        log_priors=[np.zeros(2), np.zeros(2), np.zeros(2), np.zeros(0)],
        probabilities=[np.array([0.9, 0.1]), np.array([0.3, 0.7]), np.array([0.4, 0.6]),
                       np.zeros(0)],
    )
    best = decisions.best()
    assert best == {0: "a%1", 1: "c%1", 2: "y%2"}
    table = f1_table(INSTANCES, best)
    assert table["all"]["precision"] == pytest.approx(2 / 3, abs=1e-6)
    assert table["all"]["recall"] == pytest.approx(1 / 2, abs=1e-6)
    assert table["all"]["f1"] == pytest.approx(4 / 7, abs=1e-6)
    assert table["all"]["coverage"] == pytest.approx(3 / 4, abs=1e-6)
    assert table["n"]["f1"] == pytest.approx(1.0)  # both nouns right
    # verbs: one answered and wrong, one unanswered: P = 0, R = 0, F1 = 0
    assert table["v"]["f1"] == pytest.approx(0.0)
    confidence, hit = _confidences(decisions, INSTANCES)
    np.testing.assert_allclose(confidence, [0.9, 0.7, 0.6])
    assert hit.tolist() == [True, True, False]


def test_temperature_is_fitted_on_the_engine_rows_with_their_prior() -> None:
    # Two-sense rows where the right sense leads by 0.1 cosine in 3 of 4 cases: the
    # NLL-optimal temperature makes p(lead) = 3/4, i.e. 0.1 / T = ln 3, T = 0.1 / ln 3.
    rows = [np.array([0.6, 0.5])] * 4
    instances = [_instance(f"t{i}", "n", ("a%1",) if i < 3 else ("b%1",)) for i in range(4)]
    decisions = EngineDecisions([["a%1", "b%1"]] * 4, rows, [np.zeros(2)] * 4,
                                [np.array([0.5, 0.5])] * 4)
    temperature, fitted_rows, gold, _ = fit_engine_temperature(decisions, instances)
    assert gold == [0, 0, 0, 1] and len(fitted_rows) == 4
    assert temperature == pytest.approx(0.1 / np.log(3), rel=1e-3)


def test_window_lookup_and_the_sentence_channel_needing_it() -> None:
    vectors = np.arange(8, dtype=np.float32).reshape(4, 2)
    windows = window_lookup(INSTANCES, vectors)
    # one span, one window: i1..i4 share a span here, so they share one row (the last)
    np.testing.assert_array_equal(windows([INSTANCES[2]]), vectors[[3]])
    assert windows([]).shape == (0, 2)
    with pytest.raises(ValueError, match="window"):
        engine_decisions(None, None, [], np.zeros((0, 2)), INSTANCES, np.zeros((4, 2)),
                         EngineOptions(sentence_weight=1.0))
