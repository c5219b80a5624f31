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


def build_labeled(folder: Path, id_prefix: str) -> tuple[int, int]:
    """Turn `folder/labeled.txt` (sense TAB text with the occurrence in [[...]]; a sense
    ending in ":-" marks a sense the inventory lacks) into `folder/labeled.jsonl`.
    Returns (occurrences, missing-sense ones)."""
    import json

    out: list[dict[str, object]] = []
    for line in (folder / "labeled.txt").read_text(encoding="utf-8").splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        sense, marked = line.split("\t")
        start = marked.index("[[")
        end = marked.index("]]") - 2
        text = marked.replace("[[", "").replace("]]", "")
        term = sense.split(".")[0].split(":")[0]
        out.append({"id": f"{id_prefix}-{len(out) + 1:04d}", "text": text, "start": start,
                    "end": end, "term": term,
                    "sense": None if sense.endswith(":-") else sense})
    (folder / "labeled.jsonl").write_text(
        "".join(json.dumps(row, ensure_ascii=False) + "\n" for row in out), encoding="utf-8")
    return len(out), sum(row["sense"] is None for row in out)
