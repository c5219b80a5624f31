"""Encoded corpora on disk, keyed by what they were computed from.

Encoding SemCor takes minutes on two cores; a benchmark run should pay it
once. An array is stored as `<root>/encoded/<key>.npy` (the caller passes the
settings' cache folder), where the key hashes
the input file's bytes, the encoder's model id (weights digest and layers) and
the recipe that turned the file into spans. A different file, model or recipe
gets a new key, so a stale array is never read.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np


def cache_key(parts: dict[str, Any]) -> str:
    """A short stable hash of the JSON-serialisable `parts`."""
    text = json.dumps(parts, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:24]


def cached_array(
    parts: dict[str, Any],
    compute: Callable[[], np.ndarray],
    root: Path,
) -> tuple[np.ndarray, bool]:
    """The array stored under `parts`, computing and storing it first if absent.

    Returns (array, whether it came from the cache). Writes go to a temporary
    file renamed into place, so a killed run never leaves half an array.
    """
    folder = root / "encoded"
    path = folder / f"{cache_key(parts)}.npy"
    if path.is_file():
        try:
            return np.load(path, allow_pickle=False), True
        except (OSError, ValueError):
            path.unlink(missing_ok=True)  # unreadable: recompute below
    array = compute()
    folder.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(dir=folder, suffix=".npy.part")
    try:
        with os.fdopen(handle, "wb") as stream:
            np.save(stream, array, allow_pickle=False)
        os.replace(temporary, path)
        (folder / f"{path.stem}.json").write_text(json.dumps(parts, indent=1, sort_keys=True))
    finally:
        if os.path.exists(temporary):
            os.unlink(temporary)
    return array, False
