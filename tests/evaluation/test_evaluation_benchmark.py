"""The WordNet benchmark on a small slice: prototypes from the start of SemCor, a few hundred
SemEval-2013 instances. Figures, not timings: speed is printed by `whichsense benchmark wordnet`."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from service.evaluation.benchmark import (
    BenchmarkConfig,
    Instance,
    encode_instances,
    run_benchmark,
)

TRAIN_SENTENCES = 2000  # about 20,000 SemCor instances
TEST_INSTANCES = 300


@pytest.fixture(scope="module")
def slice_result(corpora, wordnet, encoder, tmp_path_factory):  # type: ignore[no-untyped-def]
    semcor, semeval = corpora
    config = replace(BenchmarkConfig(), calibration_instances=300)
    return run_benchmark(
        semcor, semeval, config, reader=wordnet, encoder=encoder,
        limit=TEST_INSTANCES, train_limit=TRAIN_SENTENCES, cache_dir=None,
    )


@pytest.mark.slow  # encodes about 20,000 SemCor instances
def test_slice_beats_the_same_slice_most_frequent_sense(slice_result) -> None:  # type: ignore[no-untyped-def]
    # SemEval-2013 (Navigli, Jurgens & Vannella 2013) is nouns only, every instance has
    # WordNet senses, so all are answered and F1 = precision = recall.
    assert slice_result["n"] == TEST_INSTANCES
    assert slice_result["coverage"] == 1.0
    assert slice_result["per_pos"] == {"n": slice_result["f1"]}
    assert slice_result["precision"] == slice_result["recall"] == slice_result["f1"]
    assert slice_result["f1"] > slice_result["mfs_f1"]
    assert slice_result["f1"] > slice_result["variants"][
        "engine, glosses and examples only (no evidence)"]
    assert slice_result["engine"] == "service.engine.Disambiguator"


@pytest.mark.slow
def test_slice_result_carries_calibration_and_is_json(slice_result) -> None:  # type: ignore[no-untyped-def]
    assert slice_result["temperature"] > 0
    assert slice_result["calibration_instances"] > 50
    assert 0.0 <= slice_result["ece"] <= 1.0
    assert sum(b["count"] for b in slice_result["ece_bins"]) == TEST_INSTANCES
    assert set(slice_result["auto_share_at"]) == {"0.90", "0.95"}
    for point in slice_result["auto_share_at"].values():
        assert point is None or point["accuracy"] >= 0.9
    stats = slice_result["train_stats"]
    assert stats["sentences"] == TRAIN_SENTENCES
    assert stats["resolved"] + stats["skipped_unresolved"] == stats["instances"]
    assert json.loads(json.dumps(slice_result)) == slice_result


def test_encoded_instances_are_cached_by_content(  # type: ignore[no-untyped-def]
    encoder, tmp_path: Path
) -> None:
    text = "The bass swam past the dock while the band played."
    instances = [Instance("a", "d", text, 4, 8, "bass", "n", ("bass%1:13:01::",)),
                 Instance("b", "d", text, 38, 42, "band", "n", ("band%1:14:00::",))]
    first, cached_first = encode_instances(encoder, instances, tmp_path)
    again, cached_again = encode_instances(encoder, instances, tmp_path)
    assert (cached_first, cached_again) == (False, True)
    np.testing.assert_array_equal(first, again)
    np.testing.assert_allclose(np.linalg.norm(first, axis=1), 1.0, atol=1e-5)
    moved = [replace(instances[0], start=0, end=3)]  # other span, other key
    assert encode_instances(encoder, moved, tmp_path)[1] is False
    assert len(list((tmp_path / "encoded").glob("*.npy"))) == 2


@pytest.mark.slow  # encodes 300 SemCor sentences
def test_cli_reads_an_unseen_file_and_ends_with_one_json_line(  # type: ignore[no-untyped-def]
    corpora, wordnet, tmp_path: Path, capsys
) -> None:
    import gzip

    from service.cli.main import main
    from service.config import Settings

    lines = [
        {"doc": "new/1", "sent": "1", "tokens": ["The", "bank", "raised", "interest", "rates", "."],
         "instances": [
             {"id": "x1", "start": 1, "end": 2, "lemma": "bank", "pos": "n",
              "sense_keys": ["bank%1:14:00::"]},
             {"id": "x2", "start": 3, "end": 5, "lemma": "interest_rate", "pos": "n",
              "sense_keys": ["interest_rate%1:21:00::"]},  # two tokens
             {"id": "x3", "start": 2, "end": 3, "lemma": "raise", "pos": "v",
              "sense_keys": ["raise%2:99:99::"]},  # unresolvable: skipped
         ]},
        {"doc": "new/1", "sent": "2", "tokens": ["They", "fished", "from", "the", "bank", "."],
         "instances": [{"id": "x4", "start": 1, "end": 2, "lemma": "fish", "pos": "v",
                        "sense_keys": ["fish%2:35:00::"]},
                       {"id": "x5", "start": 4, "end": 5, "lemma": "bank", "pos": "n",
                        "sense_keys": ["bank%1:17:01::"]}]},
    ]
    test_file = tmp_path / "unseen.jsonl.gz"
    with gzip.open(test_file, "wt", encoding="utf-8") as handle:
        handle.write("\n".join(json.dumps(line) for line in lines) + "\n")
    semcor, _ = corpora
    code = main(["benchmark", "wordnet", "--train", str(semcor), "--test", str(test_file),
                 "--train-limit", "300", "--json"], settings=Settings(cache_dir=tmp_path / "cache"))
    assert code == 0
    last = capsys.readouterr().out.strip().splitlines()[-1]
    result = json.loads(last)
    for key in ("n", "f1", "mfs_f1", "first_sense_f1", "coverage", "seconds", "per_pos", "ece",
                "variants"):
        assert key in result
    assert result["n"] == 4 and result["coverage"] == 1.0
    assert result["test_stats"]["skipped_unresolved"] == 1
    assert set(result["per_pos"]) == {"n", "v"}
