"""Pure ordering and clustering arithmetic for the queue (numpy in, numpy out).

Most useful first is information-density sampling (Settles & Craven 2008,
"An analysis of active learning strategies for sequence labeling tasks"):
score(x) = uncertainty(x) * density(x)^beta. Their density is the mean
similarity of x to the unlabeled pool; we multiply it by the pool size so a
term with many pending occurrences outranks a term with two: the score then
estimates how many pending items a decision about x would settle.
"""

from __future__ import annotations

import numpy as np

DENSITY_BETA = 1.0
# Cosine distance under which two "none of these" contexts join one cluster (average linkage).
CLUSTER_DISTANCE = 0.45


def uncertainty(confidences: np.ndarray) -> np.ndarray:
    """Least-confident uncertainty: 1 - probability of the best sense."""
    return 1.0 - np.clip(np.asarray(confidences, np.float64), 0.0, 1.0)


def information_density(
    vectors: np.ndarray, confidences: np.ndarray, beta: float = DENSITY_BETA
) -> np.ndarray:
    """Usefulness of each pending item of one term (rows of unit `vectors`).

    density(x) = sum over the pool of max(0, cos(x, u)), the item itself included,
    i.e. Settles & Craven's mean similarity times the pool size.
    """
    vectors = np.asarray(vectors, np.float64)
    if len(vectors) == 0:
        return np.zeros(0)
    similarity = np.clip(vectors @ vectors.T, 0.0, None)
    density = similarity.sum(axis=1)
    return uncertainty(confidences) * density**beta


def cluster_labels(vectors: np.ndarray, distance: float = CLUSTER_DISTANCE) -> np.ndarray:
    """Agglomerative clusters (average linkage, cosine distance) of unit `vectors`."""
    from sklearn.cluster import AgglomerativeClustering

    vectors = np.asarray(vectors, np.float64)
    if len(vectors) < 2:
        return np.zeros(len(vectors), dtype=int)
    model = AgglomerativeClustering(
        n_clusters=None, distance_threshold=distance, metric="cosine", linkage="average"
    )
    return np.asarray(model.fit_predict(vectors), dtype=int)


def central_order(vectors: np.ndarray) -> np.ndarray:
    """Indices of `vectors` from the most to the least central (cosine to their mean)."""
    vectors = np.asarray(vectors, np.float64)
    centre = vectors.mean(axis=0)
    norm = float(np.linalg.norm(centre))
    if norm > 0:
        centre = centre / norm
    return np.argsort(-(vectors @ centre), kind="stable")
