"""Small file helpers the measurement scripts share."""

from __future__ import annotations

import hashlib
from pathlib import Path


def file_digest(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with Path(path).open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
