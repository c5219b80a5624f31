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
from .calibration import confidences_and_hits, expected_calibration_error, fit_temperature
from .outliers import MissingSenseModel, fit_missing_sense
from .prototypes import HeldOutRow, PrototypeBook
from .selective import SelectiveThreshold, choose_threshold
from .types import InventorySettings

# A temperature is fitted (here and by `whichsense calibrate`) only from at least
# this many cross-fitted items of terms with two or more senses, covering at least
# MIN_SENSE_SHARE of those terms' senses: fewer make a fit that swings wildly.
MIN_CALIBRATION_LABELS = 30
MIN_SENSE_SHARE = 0.5

TemperatureSource = Literal["inventory", "fitted", "default"]


@dataclass(frozen=True)
class CalibrationRows:
    """Cross-fitted score rows of multi-sense terms, with the sense each item carries."""

    scores: list[np.ndarray]
    gold: list[int]
    senses_labeled: int
    senses_total: int

    @property
    def labels(self) -> int:
        return len(self.gold)

    def enough(self) -> bool:
        return (
            self.labels >= MIN_CALIBRATION_LABELS
            and self.senses_total > 0
            and self.senses_labeled >= MIN_SENSE_SHARE * self.senses_total
        )

    def shortfall(self) -> str | None:
        """Why a fit would not be trusted, in words; None when there are enough labels."""
        if self.enough():
            return None
        return (
            f"{self.labels} labeled items cover {self.senses_labeled} of {self.senses_total} "
            f"senses of terms with two or more senses; a fit needs at least "
            f"{MIN_CALIBRATION_LABELS} items covering at least {MIN_SENSE_SHARE:.0%} of the senses"
        )


def calibration_rows(book: PrototypeBook, rows: list[HeldOutRow] | None = None) -> (
        CalibrationRows):
    """The cross-fitted rows that calibration and the threshold are fitted on."""
    rows = book.held_out_rows() if rows is None else rows
    multi = [row for row in rows if len(row.scores) > 1]
    total = sum(len(book.senses(term)) for term in book.terms() if len(book.senses(term)) > 1)
    labeled = {(row.term, row.gold) for row in multi}
    return CalibrationRows(
        scores=[row.scores for row in multi],
        gold=[row.gold for row in multi],
        senses_labeled=len(labeled),
        senses_total=total,
    )


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
        above = confidence >= settings.review_threshold
        review = SelectiveThreshold(
            threshold=settings.review_threshold,
            guaranteed=False,
            target_accuracy=0.0,
            delta=1.0,
            labels=rows.labels,
            needed=0,
            coverage=float(above.mean()) if rows.labels else 0.0,
            selected_accuracy=float(hits[above].mean()) if above.any() else None,
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
