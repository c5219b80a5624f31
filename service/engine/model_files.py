"""Where the transformer of a sentence-transformers model directory lies.

A sentence-transformers directory lists its modules in `modules.json`; the
transformer module's folder (often the directory itself, sometimes a
subfolder such as `0_Transformer`) holds `config.json` and the weights. The
engine reads that folder with plain `transformers`, because it needs token
offsets and attentions that sentence-transformers' pooled `encode` hides.
Standard library only, so settings checks can use it without loading torch.
"""

from __future__ import annotations

import json
from pathlib import Path


def transformer_directory(path: Path) -> Path:
    """The folder holding the transformer's config and weights (`path` itself if no
    `modules.json` names another)."""
    modules = path / "modules.json"
    if modules.is_file():
        try:
            entries = json.loads(modules.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return path
        for entry in entries if isinstance(entries, list) else []:
            if isinstance(entry, dict) and str(entry.get("type", "")).endswith("Transformer"):
                return path / str(entry.get("path", ""))
    return path


def model_dir_problem(path: Path) -> str | None:
    """Why `path` cannot be a sentence-transformers directory, or None if it looks usable."""
    if not path.is_dir():
        return f"model directory {path} does not exist"
    folder = transformer_directory(path)
    if not (folder / "config.json").is_file():
        return f"model directory {path} has no config.json"
    if not any(folder.glob("*.safetensors")) and not any(folder.glob("*.bin")):
        return f"model directory {path} has no weights (*.safetensors or *.bin)"
    return None
