"""The queue's arithmetic against its published definition and a reference library."""

from __future__ import annotations

import numpy as np
from scipy.cluster.hierarchy import fcluster, linkage

from service.review.ranking import central_order, cluster_labels, information_density


def _unit(rows: list[list[float]]) -> np.ndarray:
    array = np.array(rows, dtype=np.float64)
    return array / np.linalg.norm(array, axis=1, keepdims=True)


def test_information_density_follows_settles_and_craven():
    # Settles & Craven 2008, eq. for information density: phi(x) * (1/U sum_u sim(x, u))^beta,
    # with phi = least-confident uncertainty; ours multiplies the mean by U (pool size).
    vectors = _unit([[1, 0], [1, 0.1], [0, 1]])
    confidences = np.array([0.5, 0.9, 0.5])
    got = information_density(vectors, confidences)
    similarity = np.clip(vectors @ vectors.T, 0, None)
    expected = (1 - confidences) * similarity.mean(axis=1) * len(vectors)
    assert np.allclose(got, expected)
    # Same uncertainty: the item with a near neighbour outranks the isolated one.
    assert got[0] > got[2]


def test_dense_uncertain_item_ranks_first():
    vectors = _unit([[1, 0, 0], [1, 0.05, 0], [1, 0, 0.05], [0, 0, 1]])
    confidences = np.array([0.55, 0.55, 0.55, 0.40])
    scores = information_density(vectors, confidences)
    # The isolated item is the least confident, yet a decision on the cluster settles more.
    assert int(np.argmax(scores)) in (0, 1, 2)
    assert scores[3] < scores[:3].min()


def test_clusters_match_scipy_average_linkage():
    rng = np.random.default_rng(7)
    centres = _unit([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 1]])
    rows = np.concatenate([c + 0.08 * rng.standard_normal((6, 4)) for c in centres])
    rows /= np.linalg.norm(rows, axis=1, keepdims=True)
    ours = cluster_labels(rows, distance=0.45)
    # Reference: SciPy's hierarchical clustering, average linkage, cosine distance, cut at 0.45.
    reference = fcluster(
        linkage(rows, method="average", metric="cosine"), t=0.45, criterion="distance"
    )
    pairs_ours = {(i, j) for i in range(len(rows)) for j in range(len(rows)) if ours[i] == ours[j]}
    pairs_ref = {
        (i, j) for i in range(len(rows)) for j in range(len(rows)) if reference[i] == reference[j]
    }
    assert pairs_ours == pairs_ref
    assert len(set(ours.tolist())) == 3


def test_central_order_puts_the_member_nearest_the_mean_first():
    rows = _unit([[1, 0.4], [1, 0], [1, -0.4]])
    assert int(central_order(rows)[0]) == 1
