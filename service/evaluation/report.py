"""Score the engine's decisions on labeled occurrences and write summary.json + report.html.

Two readings of one run: *forced choice* (the most probable sense, whatever
the status) gives accuracy, per-sense scores and confusion matrices;
*as served* (abstained occurrences unanswered) gives precision, recall and F1
in the unified framework's sense. Confidence is the top probability; the
coverage curve shows, as the review threshold moves, what share would be
assigned automatically and how accurate that share is. The abstain rule (a
cosine floor) is separate and not part of the curve.

The HTML page is self-contained (figures are base64 PNG data URIs) and every
piece of text from the inputs goes through Jinja2's autoescaping.
"""

from __future__ import annotations

import base64
import io
import json
from collections import Counter, defaultdict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from service.engine.calibration import expected_calibration_error, reliability_bins
from service.evaluation.metrics import (
    CoveragePoint,
    accuracy,
    confusion_matrix,
    coverage_curve,
    label_scores,
    threshold_for_accuracy,
)
from service.evaluation.scoring import score

MAX_CURVE_POINTS = 200
MAX_ERRORS_SHOWN = 100
MIN_THRESHOLD_ITEMS = 100
"""Fewest items above a proposed review threshold before it is offered without a warning: at
90% accuracy, 100 items leave a 95% Wilson interval of 0.83-0.95; 26 items (23 right) 0.71-0.96."""


@dataclass(frozen=True)
class Outcome:
    """One labeled occurrence and what the engine decided for it."""

    occurrence_id: str
    term: str
    gold: str
    best: str  # most probable sense
    served: str | None  # the result's sense_id (None when abstained)
    confidence: float
    status: str
    text: str
    start: int
    end: int

    @property
    def correct(self) -> bool:
        return self.best == self.gold


def describe_model(model_id: str, name: str) -> str:
    """A reader's line for the encoder behind a run: its name, the layer pooled and the
    context window, read from the engine's model id (`<dir>:<digest>:L<layers>:w<max>-<min>`)."""
    parts = model_id.split(":")
    layers = next((p[1:] for p in parts if p.startswith("L")), None)
    window = next((p[1:].split("-")[0] for p in parts if p.startswith("w")), None)
    words = [name]
    if layers:
        words.append(f"layer {layers.replace('-', ' + ')} pooled")
    if window:
        words.append(f"windows of up to {window} sub-words")
    if len(parts) > 1:
        words.append(f"weights fingerprint {parts[1]}")
    return ", ".join(words)


def _thin(points: Sequence[CoveragePoint], limit: int = MAX_CURVE_POINTS) -> list[CoveragePoint]:
    if len(points) <= limit:
        return list(points)
    picks = np.unique(np.linspace(0, len(points) - 1, limit).round().astype(int))
    return [points[i] for i in picks]


def threshold_support(point: CoveragePoint | None) -> dict[str, Any] | None:
    """How much the proposed threshold rests on: the items above it and the 95% Wilson
    interval (scipy's binomtest) of their accuracy; `enough` is false under the minimum."""
    if point is None:
        return None
    from scipy.stats import binomtest

    right = round(point.accuracy * point.assigned)
    interval = binomtest(right, point.assigned).proportion_ci(0.95, method="wilson")
    return {
        "items": point.assigned,
        "accuracy_interval_95": [round(interval.low, 6), round(interval.high, 6)],
        "minimum_items": MIN_THRESHOLD_ITEMS,
        "enough": point.assigned >= MIN_THRESHOLD_ITEMS,
    }


def _point_json(point: CoveragePoint | None) -> dict[str, float] | None:
    if point is None:
        return None
    return {
        "threshold": round(point.threshold, 6),
        "coverage": round(point.coverage, 6),
        "accuracy": round(point.accuracy, 6),
        "assigned": point.assigned,
    }


def term_summary(term: str, senses: Sequence[str], items: Sequence[Outcome]) -> dict[str, Any]:
    """Per-term scores: as-served P/R/F1, forced-choice accuracy, per-sense P/R/F1, confusion."""
    gold = [o.gold for o in items]
    best = [o.best for o in items]
    labels = list(senses) + sorted({g for g in gold if g not in senses})  # unknown gold last
    served = score(
        {o.occurrence_id: {o.gold} for o in items}, {o.occurrence_id: o.served for o in items}
    )
    return {
        "term": term,
        "n": len(items),
        "accuracy": round(accuracy(gold, best), 6),
        **{k: v for k, v in served.to_json().items() if k != "n"},
        "senses": [s.to_json() for s in label_scores(gold, best, labels)],
        "confusion": {"labels": labels, "matrix": confusion_matrix(gold, best, labels)},
    }


def summarise(
    outcomes: Sequence[Outcome],
    senses_of_term: Mapping[str, Sequence[str]],
    *,
    target_accuracy: float,
    n_bins: int = 10,
) -> dict[str, Any]:
    """The whole evaluation as plain JSON-ready data."""
    if not outcomes:
        raise ValueError("no labeled occurrence could be evaluated")
    confidences = np.array([o.confidence for o in outcomes], np.float64)
    hits = np.array([o.correct for o in outcomes], bool)
    served = score(
        {o.occurrence_id: {o.gold} for o in outcomes}, {o.occurrence_id: o.served for o in outcomes}
    )
    curve = coverage_curve(confidences.tolist(), hits.tolist())
    chosen = threshold_for_accuracy(curve, target_accuracy)
    by_term: dict[str, list[Outcome]] = defaultdict(list)
    for outcome in outcomes:
        by_term[outcome.term].append(outcome)
    statuses = Counter(o.status for o in outcomes)
    return {
        "n": len(outcomes),
        "accuracy": round(float(hits.mean()), 6),
        "served": served.to_json(),
        "status_counts": dict(sorted(statuses.items())),
        "accuracy_by_status": {
            status: round(float(np.mean([o.correct for o in outcomes if o.status == status])), 6)
            for status in sorted(statuses)
        },
        "ece": round(expected_calibration_error(confidences, hits, n_bins), 6),
        "reliability": [
            {
                "lower": round(b.lower, 6),
                "upper": round(b.upper, 6),
                "count": b.count,
                "mean_confidence": round(b.mean_confidence, 6),
                "accuracy": round(b.accuracy, 6),
            }
            for b in reliability_bins(confidences, hits, n_bins)
        ],
        "target_accuracy": target_accuracy,
        "threshold_for_target": _point_json(chosen),
        "threshold_support": threshold_support(chosen),
        "coverage_curve": [_point_json(p) for p in _thin(curve)],
        "terms": [
            term_summary(term, senses_of_term.get(term, ()), items)
            for term, items in sorted(by_term.items())
        ],
    }


# Goals a search team can hold the service to on held-out data (see README,
# "How far to trust it"): what is assigned is at least this accurate, at most this
# share of in-inventory occurrences goes to review, at least this share of
# missing-sense occurrences is abstained, and confidences are this well calibrated.
GOAL_ASSIGNED_ACCURACY = 0.95
GOAL_MAX_REVIEW_SHARE = 0.25
GOAL_MIN_MISSING_ABSTAINED = 0.60
GOAL_MAX_ECE = 0.03


def _share(items: Sequence[Outcome], status: str) -> float | None:
    return sum(o.status == status for o in items) / len(items) if items else None


def _rounded(value: float | None) -> float | None:
    return None if value is None else round(value, 6)


def trust_summary(
    listed: Sequence[Outcome], missing: Sequence[Outcome], fit: dict[str, Any] | None
) -> dict[str, Any]:
    """How far the served statuses can be trusted: in-inventory occurrences (what is
    assigned, how much goes to review, how many are wrongly abstained) and occurrences
    whose sense the inventory lacks (how many are abstained), against the goals."""
    assigned = [o for o in listed if o.status == "assigned"]
    assigned_accuracy = (
        sum(o.correct for o in assigned) / len(assigned) if assigned else None
    )
    confidences = np.array([o.confidence for o in listed], np.float64)
    hits = np.array([o.correct for o in listed], bool)
    ece = expected_calibration_error(confidences, hits) if listed else None
    review_share = _share(listed, "review")
    missing_abstained = _share(missing, "abstained")
    return {
        "in_inventory": {
            "n": len(listed),
            "assigned_share": _rounded(_share(listed, "assigned")),
            "assigned_accuracy": _rounded(assigned_accuracy),
            "review_share": _rounded(review_share),
            "abstained_share": _rounded(_share(listed, "abstained")),
            "ece": _rounded(ece),
        },
        "missing_sense": {
            "n": len(missing),
            "abstained_share": _rounded(missing_abstained),
            "review_share": _rounded(_share(missing, "review")),
            "assigned_share": _rounded(_share(missing, "assigned")),
        },
        "fit": fit,
        "goals": {
            "assigned_accuracy_at_least": GOAL_ASSIGNED_ACCURACY,
            "review_share_at_most": GOAL_MAX_REVIEW_SHARE,
            "missing_abstained_at_least": GOAL_MIN_MISSING_ABSTAINED,
            "ece_at_most": GOAL_MAX_ECE,
            "met": {
                "assigned_accuracy": assigned_accuracy is not None
                and assigned_accuracy >= GOAL_ASSIGNED_ACCURACY,
                "review_share": review_share is not None
                and review_share <= GOAL_MAX_REVIEW_SHARE,
                "missing_abstained": None if missing_abstained is None
                else missing_abstained >= GOAL_MIN_MISSING_ABSTAINED,
                "ece": ece is not None and ece <= GOAL_MAX_ECE,
            },
        },
    }


# -- figures ------------------------------------------------------------------------------


def _png(figure: Any) -> bytes:
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=100, bbox_inches="tight")
    return buffer.getvalue()


def reliability_png(summary: dict[str, Any]) -> bytes:
    """Reliability diagram: accuracy per confidence bin against the diagonal."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(4.5, 4.2))
    axes = figure.subplots()
    bins = [b for b in summary["reliability"] if b["count"]]
    width = summary["reliability"][0]["upper"] - summary["reliability"][0]["lower"]
    axes.bar(
        [b["lower"] for b in bins],
        [b["accuracy"] for b in bins],
        width=width,
        align="edge",
        edgecolor="black",
        color="#4c78a8",
        label="accuracy",
    )
    axes.plot([0, 1], [0, 1], linestyle="--", color="grey", label="perfect calibration")
    axes.set_xlim(0, 1)
    axes.set_ylim(0, 1)
    axes.set_xlabel("confidence (top probability)")
    axes.set_ylabel("accuracy")
    axes.set_title(f"Reliability (ECE {summary['ece']:.3f})")
    axes.legend(loc="upper left")
    return _png(figure)


def coverage_png(summary: dict[str, Any]) -> bytes:
    """Accuracy of the automatically assigned share against that share, as the threshold moves."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(4.5, 4.2))
    axes = figure.subplots()
    curve = summary["coverage_curve"]
    axes.plot([p["coverage"] for p in curve], [p["accuracy"] for p in curve], color="#4c78a8")
    axes.axhline(
        summary["target_accuracy"],
        linestyle="--",
        color="grey",
        label=f"target {summary['target_accuracy']:.0%}",
    )
    chosen = summary["threshold_for_target"]
    if chosen:
        axes.plot(
            [chosen["coverage"]],
            [chosen["accuracy"]],
            "o",
            color="#e45756",
            label=f"threshold {chosen['threshold']:.3f}",
        )
    axes.set_xlim(0, 1.02)
    axes.set_ylim(0, 1.02)
    axes.set_xlabel("share assigned automatically")
    axes.set_ylabel("accuracy of that share")
    axes.set_title("Coverage vs accuracy")
    axes.legend(loc="lower left")
    return _png(figure)


def data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


# -- page ---------------------------------------------------------------------------------


def _template() -> Any:
    from jinja2 import Environment

    source = resources.files("service.evaluation").joinpath("report_template.html")
    environment = Environment(autoescape=True, trim_blocks=True, lstrip_blocks=True)
    return environment.from_string(source.read_text(encoding="utf-8"))


def render_html(summary: dict[str, Any], outcomes: Sequence[Outcome], meta: dict[str, Any]) -> str:
    """The report page; all input text is escaped by the template engine."""
    errors = [o for o in outcomes if not o.correct][:MAX_ERRORS_SHOWN]
    return _template().render(
        summary=summary,
        meta=meta,
        errors=[
            {
                "id": o.occurrence_id,
                "term": o.term,
                "gold": o.gold,
                "best": o.best,
                "confidence": o.confidence,
                "status": o.status,
                "before": o.text[max(0, o.start - 120) : o.start],
                "span": o.text[o.start : o.end],
                "after": o.text[o.end : o.end + 120],
            }
            for o in errors
        ],
        reliability_uri=data_uri(reliability_png(summary)),
        coverage_uri=data_uri(coverage_png(summary)),
    )


def write_report(
    folder: Path, summary: dict[str, Any], outcomes: Sequence[Outcome], meta: dict[str, Any]
) -> tuple[Path, Path]:
    """Write summary.json and report.html into `folder` (created if missing)."""
    folder.mkdir(parents=True, exist_ok=True)
    summary_path = folder / "summary.json"
    summary_path.write_text(
        json.dumps({"meta": meta, **summary}, ensure_ascii=False, indent=2) + "\n",
        encoding="utf-8",
    )
    html_path = folder / "report.html"
    html_path.write_text(render_html(summary, outcomes, meta), encoding="utf-8")
    return summary_path, html_path
