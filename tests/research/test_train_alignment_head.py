"""The alignment head's training script: the objective on a synthetic slice, and the whole
script on the first SemCor sentences (SemCor 3.0, Miller et al. 1993, ../shared/data)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the research folder

from research.train_alignment_head import (
    TrainingSet,
    main,
    train_head,
    train_prototype_head,
    with_sense_sums,
)
from service.engine.alignment import load_head

ROOT = Path(__file__).resolve().parents[2]
# ../shared next to the repository (a git worktree sits one level deeper)
SEMCOR = next((base / "shared" / "data" / "semcor30.jsonl.gz" for base in
               (ROOT.parent, ROOT.parent.parent)
               if (base / "shared" / "data" / "semcor30.jsonl.gz").is_file()),
              ROOT.parent / "shared" / "data" / "semcor30.jsonl.gz")


def _synthetic(seed: int = 0) -> TrainingSet:
    """Contexts are their sense's gloss seen through a fixed linear distortion plus noise,
    so nearest-gloss accuracy starts low and an aligning map can raise it."""
    rng = np.random.default_rng(seed)
    dim, senses = 16, 60
    glosses = rng.normal(size=(senses, dim)).astype(np.float32)
    glosses /= np.linalg.norm(glosses, axis=1, keepdims=True)
    distortion = rng.normal(size=(dim, dim)).astype(np.float32)
    candidates, gold, contexts = [], [], []
    for _ in range(1200):
        group = rng.choice(senses, size=4, replace=False)
        right = int(rng.integers(4))
        x = glosses[group[right]] @ distortion + 0.3 * rng.normal(size=dim)
        contexts.append(x / np.linalg.norm(x))
        candidates.append(group)
        gold.append(right)
    return TrainingSet(np.array(contexts, np.float32), glosses, candidates, np.array(gold))


def _accuracy(data: TrainingSet, context: np.ndarray, gloss: np.ndarray) -> float:
    x = data.contexts + data.contexts @ context
    g = data.glosses + data.glosses @ gloss
    g = g / np.linalg.norm(g, axis=1, keepdims=True)
    right = [int(np.argmax(g[c] @ v)) == t
             for v, c, t in zip(x, data.candidates, data.gold, strict=True)]
    return float(np.mean(right))


def test_training_aligns_contexts_with_their_glosses() -> None:
    data = _synthetic()
    dim = data.contexts.shape[1]
    before = _accuracy(data, np.zeros((dim, dim)), np.zeros((dim, dim)))
    context, gloss, losses = train_head(data, epochs=15, batch_size=128, learning_rate=1e-2,
                                        weight_decay=0.0, tau=0.1)
    assert losses[-1] < losses[0]
    assert _accuracy(data, context, gloss) > before + 0.2


def test_prototype_objective_aligns_contexts_with_gloss_only_senses() -> None:
    """Trained against blended prototypes with a share of senses shown gloss-only, the map
    still learns to bring contexts to their glosses (what an unlabeled sense relies on)."""
    data = with_sense_sums(_synthetic(1))
    dim = data.contexts.shape[1]
    before = _accuracy(data, np.zeros((dim, dim)), np.zeros((dim, dim)))
    context, gloss, losses = train_prototype_head(
        data, epochs=15, batch_size=128, learning_rate=1e-2, weight_decay=0.0, tau=0.1,
        gloss_only_share=0.5)
    assert losses[-1] < losses[0]
    assert _accuracy(data, context, gloss) > before + 0.1


@pytest.mark.slow
def test_the_script_runs_on_a_tiny_slice(tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    if not SEMCOR.is_file():
        pytest.fail(f"external corpus missing: {SEMCOR} (see ../shared/README.md)")
    monkeypatch.setenv("WHICHSENSE_CACHE_DIR", str(tmp_path / "cache"))
    out = tmp_path / "head.npz"
    assert main(["--semcor", str(SEMCOR), "--out", str(out), "--train-sentences", "30",
                 "--epochs", "1", "--min-count", "1"]) == 0
    from service.engine import ContextEncoder

    head = load_head(out, ContextEncoder(batch_size=8).model_id)
    assert head.dimension == 384 and head.version >= 1
    assert head.training["occurrences"] > 0 and len(head.training["data_sha256"]) == 64
