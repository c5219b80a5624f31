"""Summaries keep doubtful senses out of the flat index fields unless asked for."""

from __future__ import annotations

from service.batches.summaries import SenseTally, summarise

TAGS = {
    "bass.fish": ["dept:fishing"],
    "bass.instrument": ["dept:music", "facet:instrument"],
    "mouse.device": ["dept:electronics"],
}


def test_a_document_whose_only_answer_is_doubtful_publishes_no_tags():
    tallies = [SenseTally("bass", "bass.instrument", "review", 1, 0.48)]
    summary = summarise(tallies, TAGS)
    assert summary["sense_ids"] == [] and summary["tags"] == []
    assert summary["terms"] == [
        {"term": "bass", "occurrences": 1, "abstained": 0, "doubtful": 1, "senses": []}
    ]
    assert "doubtful_tags" not in summary


def test_doubtful_senses_are_listed_apart_when_asked_for():
    tallies = [
        SenseTally("bass", "bass.instrument", "review", 2, 0.48),
        SenseTally("bass", "bass.fish", "assigned", 1, 0.91),
        SenseTally("bass", "bass.fish", "review", 1, 0.55),
        SenseTally("bass", None, "abstained", 1, 0.0),
        SenseTally("mouse", "mouse.device", "reviewed", 1, 0.4),
    ]
    default = summarise(tallies, TAGS)
    assert default["sense_ids"] == ["bass.fish", "mouse.device"]
    assert default["tags"] == ["dept:electronics", "dept:fishing"]
    fish = default["terms"][0]["senses"]
    assert [(s["sense_id"], s["count"], s["assigned"], s["review"]) for s in fish] == [
        ("bass.fish", 1, 1, 0)
    ]
    assert default["terms"][0]["doubtful"] == 3 and default["terms"][0]["abstained"] == 1
    assert default["terms"][1]["senses"][0]["reviewed"] == 1

    wide = summarise(tallies, TAGS, include_doubtful=True)
    assert wide["sense_ids"] == default["sense_ids"] and wide["tags"] == default["tags"]
    assert wide["doubtful_sense_ids"] == ["bass.instrument"]
    assert wide["doubtful_tags"] == ["dept:music", "facet:instrument"]
    senses = {s["sense_id"]: s for s in wide["terms"][0]["senses"]}
    assert senses["bass.instrument"]["doubtful"] is True
    assert senses["bass.instrument"]["review"] == 2
    # A sense with one confident occurrence is not doubtful, and its count includes both.
    assert senses["bass.fish"]["doubtful"] is False
    assert (senses["bass.fish"]["count"], senses["bass.fish"]["best_confidence"]) == (2, 0.91)
    assert wide["occurrences"] == default["occurrences"] == 6


def test_an_unknown_status_with_a_sense_counts_as_doubtful():
    summary = summarise([SenseTally("bass", "bass.fish", "pending-check", 1, 0.9)], TAGS)
    assert summary["sense_ids"] == [] and summary["terms"][0]["doubtful"] == 1
