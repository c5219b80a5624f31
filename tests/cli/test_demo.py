"""`whichsense demo` end to end on a tiny corpus: HTTP batch, evidence, calibration, report."""

from __future__ import annotations

import json
import os
import re
import socket
import subprocess
import sys

import pytest

from service.cli.demo import split_labels
from service.cli.main import main
from service.config import Settings
from tests.conftest import REPO

DOCUMENTS = [
    {"id": "d1", "text": "Caught a largemouth bass off the jetty at dawn, then a second bass."},
    {"id": "d2", "text": "The bass on this speaker rattles the shelf when the film gets loud."},
    {
        "id": "d3",
        "text": "My wireless mouse stopped scrolling after a week.",
        "fields": {"title": "Mouse trouble"},
    },
    {"id": "d4", "text": "A mouse chewed through the bag of oats in the shed."},
    {"id": "d5", "text": "Nothing ambiguous here at all."},
    {"id": "d6", "text": "He reeled in a striped bass from the surf."},
    {"id": "d7", "text": "Turn the bass up on the amplifier for the gig."},
    {"id": "d8", "text": "The cat brought a dead mouse to the porch."},
]


def _label(doc: dict, term: str, sense: str, nth: int = 0) -> dict:
    text = doc["text"]
    start = -1
    for _ in range(nth + 1):
        start = text.lower().index(term, start + 1)
    return {
        "id": f"{doc['id']}-{nth}",
        "document_id": doc["id"],
        "text": text,
        "start": start,
        "end": start + len(term),
        "term": term,
        "sense": sense,
    }


@pytest.fixture
def tiny_corpus(tmp_path, inventory_document):
    corpus = tmp_path / "corpus"
    corpus.mkdir()
    (corpus / "inventory.json").write_text(json.dumps(inventory_document), encoding="utf-8")
    with (corpus / "documents.jsonl").open("w", encoding="utf-8") as out:
        for doc in DOCUMENTS:
            out.write(json.dumps(doc) + "\n")
    by_id = {d["id"]: d for d in DOCUMENTS}
    labels = [
        _label(by_id["d1"], "bass", "bass.fish"),
        _label(by_id["d1"], "bass", "bass.fish", 1),
        _label(by_id["d2"], "bass", "bass.music"),
        _label(by_id["d3"], "mouse", "mouse.device"),
        _label(by_id["d4"], "mouse", "mouse.animal"),
        _label(by_id["d6"], "bass", "bass.fish"),
        _label(by_id["d7"], "bass", "bass.music"),
        _label(by_id["d8"], "mouse", "mouse.animal"),
    ]
    with (corpus / "labeled.jsonl").open("w", encoding="utf-8") as out:
        for label in labels:
            out.write(json.dumps(label) + "\n")
    return corpus


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_split_keeps_each_document_on_one_side(tiny_corpus):
    evidence, held_out = split_labels(tiny_corpus / "labeled.jsonl")
    assert len(evidence) + len(held_out) == 8
    assert not {x["document_id"] for x in evidence} & {x["document_id"] for x in held_out}


@pytest.mark.slow
def test_demo_runs_the_main_job_and_reports(tiny_corpus, tmp_path, capsys):
    settings = Settings(
        database_url=f"sqlite:///{tmp_path / 'demo.db'}", cache_dir=tmp_path / "cache"
    )
    output = tmp_path / "out"
    status = main(
        [
            "demo",
            "--corpus",
            str(tiny_corpus),
            "--output",
            str(output),
            "--port",
            str(_free_port()),
            "--fresh",
            "--exit",
        ],
        settings=settings,
    )
    captured = capsys.readouterr()
    printed = captured.out
    assert status == 0, printed
    assert "admin API key of team 'demo'" in printed
    # The second team on the service cannot see the demo team's batch.
    assert "with its own admin key: HTTP 404" in captured.err
    results = [json.loads(line) for line in (output / "results.jsonl").read_text().splitlines()]
    # d1 has two occurrences, d3 one in the title and one in the text, d5 none: 9 in all.
    assert len(results) == 9
    assert {(r["document_id"], r["field"]) for r in results if r["term"] == "mouse"} >= {
        ("d3", "title"),
        ("d3", "text"),
    }
    assert "batch " in printed and ": done, 9 occurrences in 8 documents" in printed
    assert "held-out labels:" in printed
    assert "prototypes ready in" in captured.err
    assert re.search(r"review queue: http://127\.0\.0\.1:\d+/review .*sign in with: ws_", printed)
    summary = json.loads((output / "report" / "summary.json").read_text())
    _, held_out = split_labels(tiny_corpus / "labeled.jsonl")
    assert summary["n"] == len(held_out)
    # four evidence labels are too few for a temperature fit: refused, nothing stored
    assert "not stored:" in printed
    assert summary["meta"]["inventory_version"] == 1
    assert 0.0 <= summary["accuracy"] <= 1.0
    assert (output / "report" / "report.html").stat().st_size > 1000


@pytest.mark.parametrize("verbose", [False, True])
def test_matplotlib_font_cache_notice_stays_out_of_the_demo_output(tmp_path, verbose):
    """A fresh matplotlib config folder makes matplotlib build its font cache and say so
    (logged: "generated new fontManager", and a warning when it takes long); the demo
    keeps it quiet unless asked to be verbose."""
    script = (
        "import logging, sys; logging.basicConfig(level=logging.INFO);"
        "from service.cli.demo import quiet_libraries;"
        f"quiet_libraries({verbose});"
        "from matplotlib.figure import Figure; Figure().savefig(sys.argv[1])"
    )
    env = {**os.environ, "MPLCONFIGDIR": str(tmp_path / "mpl"), "PYTHONPATH": str(REPO)}
    done = subprocess.run(
        [sys.executable, "-c", script, str(tmp_path / "plot.png")],
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )
    assert ("matplotlib.font_manager" in done.stderr) is verbose, done.stderr
