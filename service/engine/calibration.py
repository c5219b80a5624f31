"""Calibrate confidences: temperature scaling and the measures that judge it.

Temperature scaling (Guo et al. 2017) fits one scalar T so that
softmax(similarities / T) minimises the negative log-likelihood of held-out
labels. Candidate sets differ in size from term to term, so inputs are lists
of 1-D similarity arrays with the index of the right sense in each.

Cross-fitted rows (PrototypeBook.held_out_rows) rebuild the held-out item's
prototype and hub penalty without it, with the same rule scoring uses, so a
refit follows any change of the prototype rule. Labeled items are the example
sentences and the evidence.

A proposed temperature is judged before it is stored (propose_calibration):
it needs at least MIN_CALIBRATION_LABELS items covering enough senses, and its
calibration error on held-out rows (two-fold: fitted on one half, measured on
the other) must not be worse than the current temperature's.

Expected calibration error uses equal-width confidence bins (Naeini et al.
2015; Guo et al. 2017): sum over bins of |accuracy - mean confidence| weighted
by the bin's share of instances.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from .assignment import softmax
from .prototypes import DEFAULT_PRIOR_SMOOTHING, HeldOutRow, PrototypeBook

MIN_TEMPERATURE = 1e-3
MAX_TEMPERATURE = 10.0


def _check(similarities: Sequence[np.ndarray], gold: Sequence[int]) -> None:
    if len(similarities) != len(gold):
        raise ValueError("one gold index per similarity row")
    if not len(gold):
        raise ValueError("calibration needs at least one labeled instance")


def _priors(
    log_priors: Sequence[np.ndarray] | None, similarities: Sequence[np.ndarray]
) -> Sequence[np.ndarray | float]:
    if log_priors is None:
        return [0.0] * len(similarities)
    if len(log_priors) != len(similarities):
        raise ValueError("one log-prior row per similarity row")
    return log_priors


def negative_log_likelihood(
    similarities: Sequence[np.ndarray],
    gold: Sequence[int],
    temperature: float,
    log_priors: Sequence[np.ndarray] | None = None,
) -> float:
    """Mean -log p(gold) under softmax(similarities / temperature + log_prior)."""
    _check(similarities, gold)
    total = 0.0
    priors = _priors(log_priors, similarities)
    for row, right, prior in zip(similarities, gold, priors, strict=True):
        scaled = np.asarray(row, np.float64) / temperature + prior
        top = scaled.max()
        total -= scaled[right] - top - np.log(np.exp(scaled - top).sum())
    return total / len(gold)


def fit_temperature(
    similarities: Sequence[np.ndarray],
    gold: Sequence[int],
    bounds: tuple[float, float] = (MIN_TEMPERATURE, MAX_TEMPERATURE),
    log_priors: Sequence[np.ndarray] | None = None,
) -> float:
    """The temperature minimising NLL, by a bounded 1-D search over log T."""
    _check(similarities, gold)
    rows = [np.asarray(row, np.float64) for row in similarities]
    priors = _priors(log_priors, similarities)
    informative = [
        (row, right, prior)
        for row, right, prior in zip(rows, gold, priors, strict=True)
        if len(row) > 1
    ]
    if not informative:
        raise ValueError("every instance has a single candidate: nothing to calibrate")
    rows_used = [row for row, _, _ in informative]
    gold_used = [right for _, right, _ in informative]
    priors_used = [np.broadcast_to(prior, row.shape) for row, _, prior in informative]
    result = minimize_scalar(
        lambda log_t: negative_log_likelihood(
            rows_used, gold_used, float(np.exp(log_t)), priors_used
        ),
        bounds=(np.log(bounds[0]), np.log(bounds[1])),
        method="bounded",
        options={"xatol": 1e-4},
    )
    return float(np.exp(result.x))


def confidences_and_hits(
    similarities: Sequence[np.ndarray],
    gold: Sequence[int],
    temperature: float,
    log_priors: Sequence[np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Top probability and whether the top sense is right, per instance."""
    _check(similarities, gold)
    confidence = np.empty(len(gold))
    hit = np.empty(len(gold), bool)
    priors = _priors(log_priors, similarities)
    for i, (row, right, prior) in enumerate(zip(similarities, gold, priors, strict=True)):
        probabilities = softmax(np.asarray(row, np.float64), temperature, np.asarray(prior))
        best = int(np.argmax(probabilities))
        confidence[i] = probabilities[best]
        hit[i] = best == right
    return confidence, hit


@dataclass(frozen=True)
class ReliabilityBin:
    lower: float
    upper: float
    count: int
    mean_confidence: float
    accuracy: float


def reliability_bins(
    confidence: np.ndarray, hit: np.ndarray, n_bins: int = 10
) -> list[ReliabilityBin]:
    """Equal-width bins ((m-1)/M, m/M] as in Guo et al. 2017; a confidence of 0 joins the first."""
    confidence = np.asarray(confidence, np.float64)
    hit = np.asarray(hit, np.float64)
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    index = np.searchsorted(edges[1:-1], confidence, side="left")
    bins = []
    for b in range(n_bins):
        members = index == b
        count = int(members.sum())
        bins.append(
            ReliabilityBin(
                lower=float(edges[b]),
                upper=float(edges[b + 1]),
                count=count,
                mean_confidence=float(confidence[members].mean()) if count else 0.0,
                accuracy=float(hit[members].mean()) if count else 0.0,
            )
        )
    return bins


def expected_calibration_error(confidence: np.ndarray, hit: np.ndarray, n_bins: int = 10) -> float:
    """ECE over equal-width bins: sum_b (n_b / n) * |accuracy_b - confidence_b|."""
    total = len(confidence)
    if total == 0:
        raise ValueError("ECE of no instances")
    return float(
        sum(
            b.count / total * abs(b.accuracy - b.mean_confidence)
            for b in reliability_bins(confidence, hit, n_bins)
            if b.count
        )
    )


# A temperature is fitted (here and by `whichsense calibrate`) only from at least
# this many cross-fitted items of terms with two or more senses, covering at least
# MIN_SENSE_SHARE of those terms' senses: fewer make a fit that swings wildly.
MIN_CALIBRATION_LABELS = 30
MIN_SENSE_SHARE = 0.5


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
class CalibrationReport:
    """What fitting on an inventory's own labels gave, for the curator to read."""

    temperature: float
    instances: int
    nll_before: float
    nll_after: float
    ece_before: float
    ece_after: float
    accuracy: float


def leave_one_out_similarities(
    book: PrototypeBook, *, sense_prior: bool = False
) -> tuple[list[np.ndarray], list[int], list[np.ndarray]]:
    """For every labeled evidence item of a multi-sense term: its similarities to the term's
    prototypes rebuilt without it, its sense's index, and the sense prior without it
    (zeros when sense_prior is False): leave-one-out, so an item never votes for itself.

    Uses the book's kept item vectors, so no encoding happens here.
    """
    rows: list[np.ndarray] = []
    gold: list[int] = []
    priors: list[np.ndarray] = []
    for term in book.terms():
        sense_ids = book.senses(term)
        if len(sense_ids) < 2:
            continue
        matrix = book.matrix(term)
        counts = np.array([book.counts(s)[1] for s in sense_ids], np.float64)
        for _evidence_id, sense_id, vector in book.evidence_items(term):
            position = sense_ids.index(sense_id)
            held_out = book.prototype(sense_id, without=vector.astype(np.float64))
            prototypes = matrix.copy()
            prototypes[position] = held_out if held_out is not None else 0.0
            rows.append(prototypes @ vector)
            gold.append(position)
            if sense_prior:
                smoothed = counts + DEFAULT_PRIOR_SMOOTHING
                smoothed[position] -= 1.0
                priors.append(np.log(smoothed / smoothed.sum()))
            else:
                priors.append(np.zeros(len(sense_ids)))
    return rows, gold, priors


def calibrate_book(
    book: PrototypeBook,
    default_temperature: float,
    n_bins: int = 10,
) -> CalibrationReport:
    """Fit an inventory's temperature on its own labeled items, cross-fitted
    (every item scored without it), on the scores assign() sees."""
    rows = calibration_rows(book)
    if not rows.labels:
        raise ValueError("no labeled items on terms with two or more senses")
    temperature = fit_temperature(rows.scores, rows.gold)
    before = confidences_and_hits(rows.scores, rows.gold, default_temperature)
    after = confidences_and_hits(rows.scores, rows.gold, temperature)
    return CalibrationReport(
        temperature=temperature,
        instances=rows.labels,
        nll_before=negative_log_likelihood(rows.scores, rows.gold, default_temperature),
        nll_after=negative_log_likelihood(rows.scores, rows.gold, temperature),
        ece_before=expected_calibration_error(*before, n_bins=n_bins),
        ece_after=expected_calibration_error(*after, n_bins=n_bins),
        accuracy=float(after[1].mean()),
    )


@dataclass(frozen=True)
class CalibrationProposal:
    """A temperature fit and whether it may be stored; figures are held-out (two-fold)."""

    current_temperature: float
    temperature: float | None  # None when refused for too few labels
    labels: int
    accuracy: float | None
    ece_before: float | None  # held-out ECE at the current temperature
    ece_after: float | None  # held-out ECE with temperatures fitted on the other half
    refused: str | None  # why it must not be stored, in words; None when it may be

    @property
    def accepted(self) -> bool:
        return self.refused is None

    def to_json(self) -> dict[str, object]:
        def rounded(value: float | None) -> float | None:
            return None if value is None else round(value, 6)

        return {
            "accepted": self.accepted,
            "refused": self.refused,
            "labels": self.labels,
            "accuracy": rounded(self.accuracy),
            "temperature_before": rounded(self.current_temperature),
            "temperature_after": rounded(self.temperature),
            "ece_before": rounded(self.ece_before),
            "ece_after": rounded(self.ece_after),
        }


def propose_calibration(
    book: PrototypeBook, current_temperature: float, n_bins: int = 10
) -> CalibrationProposal:
    """Fit a temperature and judge it: refused with too few labels, or when its
    held-out calibration error (two folds, alternating items) is worse than the
    current temperature's."""
    rows = calibration_rows(book)
    shortfall = rows.shortfall()
    if shortfall is not None:
        return CalibrationProposal(
            current_temperature, None, rows.labels, None, None, None, shortfall
        )
    halves = [list(range(0, rows.labels, 2)), list(range(1, rows.labels, 2))]
    confidence_now: list[np.ndarray] = []
    confidence_new: list[np.ndarray] = []
    hits: list[np.ndarray] = []
    for fit_on, test_on in (halves, halves[::-1]):
        fold_t = fit_temperature(
            [rows.scores[i] for i in fit_on], [rows.gold[i] for i in fit_on]
        )
        test_scores = [rows.scores[i] for i in test_on]
        test_gold = [rows.gold[i] for i in test_on]
        now, hit = confidences_and_hits(test_scores, test_gold, current_temperature)
        new, _ = confidences_and_hits(test_scores, test_gold, fold_t)
        confidence_now.append(now)
        confidence_new.append(new)
        hits.append(hit)
    hit_all = np.concatenate(hits)
    ece_before = expected_calibration_error(np.concatenate(confidence_now), hit_all, n_bins)
    ece_after = expected_calibration_error(np.concatenate(confidence_new), hit_all, n_bins)
    temperature = fit_temperature(rows.scores, rows.gold)
    refused = None
    if ece_after > ece_before:
        refused = (
            f"the fit would make held-out calibration error worse "
            f"({ece_before:.4f} -> {ece_after:.4f}); the current temperature stays"
        )
    return CalibrationProposal(
        current_temperature,
        temperature,
        rows.labels,
        float(hit_all.mean()),
        ece_before,
        ece_after,
        refused,
    )
