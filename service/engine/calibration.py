"""Calibrate confidences: temperature scaling and the measures that judge it.

Temperature scaling (Guo et al. 2017) fits one scalar T so that
softmax(similarities / T) minimises the negative log-likelihood of held-out
labels. Candidate sets differ in size from term to term, so inputs are lists
of 1-D similarity arrays with the index of the right sense in each.

Leave-one-out rows rebuild the held-out item's prototype with the same blend
(PrototypeBook.prototype, evidence weight n/(n+k)) that scoring uses, so a
refit follows any change of the prototype rule.

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
from .prototypes import DEFAULT_PRIOR_SMOOTHING, PrototypeBook

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
    *,
    sense_prior: bool = False,
) -> CalibrationReport:
    """Fit an inventory's temperature on its own labeled evidence, leave-one-out.

    `sense_prior` must match the Disambiguator's (both off by default), so the
    fitted temperature fits the rows assign() sees."""
    rows, gold, priors = leave_one_out_similarities(book, sense_prior=sense_prior)
    if not rows:
        raise ValueError("no labeled evidence on terms with two or more senses")
    temperature = fit_temperature(rows, gold, log_priors=priors)
    before = confidences_and_hits(rows, gold, default_temperature, priors)
    after = confidences_and_hits(rows, gold, temperature, priors)
    return CalibrationReport(
        temperature=temperature,
        instances=len(gold),
        nll_before=negative_log_likelihood(rows, gold, default_temperature, priors),
        nll_after=negative_log_likelihood(rows, gold, temperature, priors),
        ece_before=expected_calibration_error(*before, n_bins=n_bins),
        ece_after=expected_calibration_error(*after, n_bins=n_bins),
        accuracy=float(after[1].mean()),
    )
