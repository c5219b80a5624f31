"""`inventory wordnet` and `evidence import` against a real (migrated SQLite) database."""

from __future__ import annotations

import gzip
import json
from pathlib import Path

from service.cli.main import main
from service.config import Settings
from service.store.database import session_scope
from service.store.evidence import count_evidence
from service.store.inventories import get_inventory, load_inventory_spec
from service.store.teams import choose_team

CORPUS = [
    {"doc": "d1", "sent": "1", "tokens": ["He", "caught", "a", "bass", "and", "a", "trout", "."],
     "instances": [
         {"id": "d1.t1", "start": 3, "end": 4, "lemma": "bass", "pos": "n",
          "sense_keys": ["bass%1:13:01::"]},
         {"id": "d1.t2", "start": 6, "end": 7, "lemma": "trout", "pos": "n",  # not in inventory
          "sense_keys": ["trout%1:13:00::"]},
         {"id": "d1.t3", "start": 1, "end": 2, "lemma": "catch", "pos": "v",
          "sense_keys": ["catch%2:99:99::"]},  # no such key
     ]},
]


def only_team(session) -> int:  # type: ignore[no-untyped-def]
    """The CLI made team `default` on the empty database."""
    return choose_team(session, None)[0].id


def test_wordnet_inventory_then_corpus_and_labeled_evidence(  # type: ignore[no-untyped-def]
    settings: Settings, tmp_path: Path, wordnet, capsys
) -> None:
    assert main(["inventory", "wordnet", "wn-bass", "--lemma", "bass", "--pos", "n"]) == 0
    with session_scope(settings) as session:
        spec = load_inventory_spec(session, only_team(session), "wn-bass")
    assert [t.term for t in spec.terms] == ["bass"] and len(spec.terms[0].senses) == 8

    corpus = tmp_path / "tiny.jsonl.gz"
    with gzip.open(corpus, "wt", encoding="utf-8") as handle:
        handle.write("\n".join(json.dumps(line) for line in CORPUS) + "\n")
    assert main(["evidence", "import", str(corpus), "--inventory", "wn-bass"]) == 0
    out = capsys.readouterr()
    assert "stored 1 evidence items" in out.out
    assert "1 skipped because no label resolved" in out.out
    assert "unknown term for 'wn-bass'): 1" in out.err

    labeled = tmp_path / "labeled.jsonl"
    rows = [
        {"id": "a", "text": "Bass swim upstream.", "start": 0, "end": 4, "term": "Bass",
         "sense": "bass%1:13:01::"},
        {"id": "b", "text": "The bass was too loud.", "start": 4, "end": 8, "term": "bass",
         "sense": "bass.music"},  # not a sense of this inventory
    ]
    labeled.write_text("\n".join(json.dumps(r) for r in rows) + "\n", encoding="utf-8")
    assert main(["evidence", "import", str(labeled), "--inventory", "wn-bass"]) == 0
    out = capsys.readouterr()
    assert "stored 1 evidence items" in out.out
    assert "unknown sense for 'wn-bass'): 1" in out.err
    with session_scope(settings) as session:
        counts = count_evidence(session, get_inventory(session, only_team(session), "wn-bass").id)
    assert sum(counts.values()) == 2
