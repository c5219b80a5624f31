"""Sentence-transformers model directories: the transformer folder named by modules.json
(layout of the sentence-transformers library's saved models, `modules.json` with
`sentence_transformers.models.Transformer` entries)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from service.config import Settings, resolve_model_dir
from service.engine.model_files import model_dir_problem, transformer_directory


def test_the_bundled_model_keeps_its_transformer_at_the_top() -> None:
    bundled = resolve_model_dir(Settings())
    assert (bundled / "modules.json").is_file()
    assert transformer_directory(bundled) == bundled
    assert model_dir_problem(bundled) is None


def test_a_transformer_in_a_subfolder_is_found(tmp_path: Path, encoder) -> None:  # type: ignore[no-untyped-def]
    """A directory whose modules.json puts the transformer in 0_Transformer loads, and
    encodes exactly as the same weights at the top level do."""
    bundled = resolve_model_dir(Settings())
    inner = tmp_path / "0_Transformer"
    inner.mkdir()
    for entry in bundled.iterdir():
        if entry.is_file() and entry.name != "modules.json":
            shutil.copyfile(entry, inner / entry.name)
    (tmp_path / "modules.json").write_text(json.dumps([
        {"idx": 0, "name": "0", "path": "0_Transformer",
         "type": "sentence_transformers.models.Transformer"},
        {"idx": 1, "name": "1", "path": "1_Pooling",
         "type": "sentence_transformers.models.Pooling"},
    ]), encoding="utf-8")
    assert transformer_directory(tmp_path) == inner
    assert model_dir_problem(tmp_path) is None
    from service.engine.encoder import ContextEncoder

    moved = ContextEncoder(tmp_path)
    spans = [("Turn the bass down, the windows rattle.", 9, 13)]
    assert float((moved.encode_spans(spans) @ encoder.encode_spans(spans).T)[0, 0]) > 0.9999


def test_a_directory_without_weights_is_a_clear_problem(tmp_path: Path) -> None:
    (tmp_path / "config.json").write_text("{}", encoding="utf-8")
    assert "no weights" in str(model_dir_problem(tmp_path))
    assert "does not exist" in str(model_dir_problem(tmp_path / "missing"))
