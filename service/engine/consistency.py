"""Let occurrences of one term in one document share evidence.

Gale, Church & Yarowsky (1992) observed that a word tends to keep one sense
throughout a discourse ("one sense per discourse"). Rather than forcing a
single sense, each occurrence's similarity vector is mixed with the mean
similarity vector of all occurrences of the same term in the same document:

    s_i' = (1 - w) * s_i + w * mean_j s_j

With w < 1 an occurrence whose own context clearly favours another sense keeps
it, while a weak, ambiguous context borrows from its neighbours. The default
weight was chosen on SemCor development documents (see docs/measurements.md).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence

import numpy as np

DEFAULT_CONSISTENCY_WEIGHT = 0.5


def share_within_documents(
    similarities: Sequence[np.ndarray],
    groups: Sequence[Hashable],
    weight: float = DEFAULT_CONSISTENCY_WEIGHT,
) -> list[np.ndarray]:
    """Mix each similarity row with the mean of its group's rows.

    `groups[i]` identifies (document, term) of row i; rows of one group share
    one candidate list, so they have one length. Groups of one are unchanged.
    """
    if not 0.0 <= weight <= 1.0:
        raise ValueError("weight must lie in [0, 1]")
    if len(similarities) != len(groups):
        raise ValueError("one group key per similarity row")
    members: dict[Hashable, list[int]] = {}
    for i, key in enumerate(groups):
        members.setdefault(key, []).append(i)
    mixed = [np.asarray(row, np.float64) for row in similarities]
    if weight == 0.0:
        return mixed
    for indices in members.values():
        if len(indices) < 2:
            continue
        mean = np.mean([mixed[i] for i in indices], axis=0)
        for i in indices:
            mixed[i] = (1.0 - weight) * mixed[i] + weight * mean
    return mixed
