"""What an inventory's own labels say about trusting the engine: one cheap re-fit.

From the labeled items a PrototypeBook already holds (example sentences,
evidence, review decisions; vectors kept, so nothing is encoded) it computes,
cross-fitted so that no item scores itself (PrototypeBook.held_out_rows):

- the softmax temperature (temperature scaling, Guo et al. 2017) unless the
  inventory stores one, and only from at least MIN_CALIBRATION_LABELS items;
- the review threshold that guarantees `target_accuracy` on what is assigned,
  with probability 1 - delta (selective.py), and the expected review share;
- the missing-sense calibration set (outliers.py).

Everything here is a pure function of the book and the settings; the
Disambiguator runs it when it is built, i.e. whenever evidence arrives.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from .assignment import DEFAULT_TEMPERATURE
from .calibration import (
    calibration_rows,
    confidences_and_hits,
    expected_calibration_error,
    fit_temperature,
)
from .outliers import MissingSenseModel, fit_missing_sense
from .prototypes import PrototypeBook
from .selective import SelectiveThreshold, choose_threshold, selection_at
from .types import InventorySettings

TemperatureSource = Literal["inventory", "fitted", "default"]

@dataclass(frozen=True)
class TrustFit:
    """The fitted decision settings of one inventory version and its evidence."""

    temperature: float
    temperature_source: TemperatureSource
    review: SelectiveThreshold
    missing: MissingSenseModel
    labels: int  # cross-fitted items of multi-sense terms
    accuracy: float | None  # their cross-fitted accuracy
    ece: float | None  # their expected calibration error (10 bins) at `temperature`
    shortfall: str | None  # why the labels are too few for a fit, in words

    def to_json(self) -> dict[str, object]:
        return {
            "labels": self.labels,
            "cross_fitted_accuracy": None if self.accuracy is None else round(self.accuracy, 6),
            "ece": None if self.ece is None else round(self.ece, 6),
            "temperature": round(self.temperature, 6),
            "temperature_source": self.temperature_source,
            "review": self.review.to_json(),
            "missing_sense": {
                "false_flag_rate": self.missing.rate,
                "labels": self.missing.labels,
                "active": self.missing.usable,
            },
            "too_few_labels": self.shortfall,
        }


def fit_trust(book: PrototypeBook, settings: InventorySettings) -> TrustFit:
    """Temperature, guaranteed review threshold and missing-sense model for `book`."""
    rows = calibration_rows(book)
    if settings.temperature:
        temperature, source = float(settings.temperature), "inventory"
    elif rows.enough():
        temperature, source = fit_temperature(rows.scores, rows.gold), "fitted"
    else:
        temperature, source = DEFAULT_TEMPERATURE, "default"
    if rows.labels:
        confidence, hits = confidences_and_hits(rows.scores, rows.gold, temperature)
        accuracy: float | None = float(hits.mean())
        ece: float | None = expected_calibration_error(confidence, hits)
    else:
        confidence, hits = np.zeros(0), np.zeros(0, bool)
        accuracy = ece = None
    if settings.target_accuracy is None:
        review = selection_at(
            settings.review_threshold, confidence, hits, False, 0.0, 1.0, 0
        )
    else:
        review = choose_threshold(
            confidence,
            hits,
            settings.target_accuracy,
            settings.target_delta,
            fallback=max(settings.review_threshold, settings.target_accuracy),
        )
    return TrustFit(
        temperature=temperature,
        temperature_source=source,  # type: ignore[arg-type]
        review=review,
        missing=fit_missing_sense(book, settings.missing_sense_rate),
        labels=rows.labels,
        accuracy=accuracy,
        ece=ece,
        shortfall=rows.shortfall(),
    )
