"""Read labeled occurrences: JSON Lines of {id, text, start, end, term, sense}.

`text[start:end]` (code-point offsets) is the occurrence of `term`; `sense`
is its correct sense id, or null for an occurrence whose sense the inventory
lacks (read only where the caller allows it: evaluation scores how often such
occurrences are abstained; they are never evidence). This is what
`whichsense evaluate` scores against and what `whichsense evidence import` stores.
"""

from __future__ import annotations

import gzip
import json
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from service.line_errors import LineError


class LabeledFormatError(LineError):
    """A line does not follow the labeled-occurrence format; names the line."""


@dataclass(frozen=True)
class LabeledOccurrence:
    occurrence_id: str
    text: str
    start: int
    end: int
    term: str
    sense: str  # "" when missing_sense
    missing_sense: bool = False

    @property
    def surface(self) -> str:
        return self.text[self.start : self.end]


def parse_labeled(
    obj: Any, where: tuple[str, int], *, allow_missing: bool = False
) -> LabeledOccurrence:
    """One parsed JSON line as a labeled occurrence, checked; `allow_missing` accepts
    `"sense": null` (a sense the inventory lacks)."""
    if not isinstance(obj, dict):
        raise LabeledFormatError(*where, "a line must hold a JSON object")
    missing = allow_missing and obj.get("sense", "") is None
    if missing:
        obj = {**obj, "sense": "-"}
    for name, kind in (("text", str), ("term", str), ("sense", str), ("start", int), ("end", int)):
        value = obj.get(name)
        if not isinstance(value, kind) or (kind is int and isinstance(value, bool)):
            raise LabeledFormatError(*where, f"'{name}' must be a {kind.__name__}")
    text, start, end = obj["text"], obj["start"], obj["end"]
    if not 0 <= start < end <= len(text):
        raise LabeledFormatError(*where, f"offsets {start}..{end} fall outside the text")
    if not obj["term"].strip() or not obj["sense"].strip():
        raise LabeledFormatError(*where, "'term' and 'sense' must not be blank")
    return LabeledOccurrence(
        occurrence_id=str(obj.get("id") or f"line-{where[1]}"),
        text=text,
        start=start,
        end=end,
        term=" ".join(obj["term"].split()),
        sense="" if missing else obj["sense"].strip(),
        missing_sense=missing,
    )


def _open(path: Path) -> Any:
    with path.open("rb") as probe:
        gzipped = probe.read(2) == b"\x1f\x8b"
    return gzip.open(path, "rt", encoding="utf-8") if gzipped else path.open(encoding="utf-8")


def read_json_lines(path: str | Path) -> Iterator[tuple[int, Any]]:
    """(line number, parsed object) for each non-blank line of a JSON Lines file (gzip or not)."""
    path = Path(path)
    with _open(path) as handle:
        for line_number, line in enumerate(handle, start=1):
            if not line.strip():
                continue
            try:
                yield line_number, json.loads(line)
            except json.JSONDecodeError as error:
                raise LabeledFormatError(str(path), line_number, f"not JSON: {error.msg}") from None


def read_labeled(path: str | Path, *, allow_missing: bool = False) -> Iterator[
        LabeledOccurrence]:
    """Stream the labeled occurrences of a file."""
    for line_number, obj in read_json_lines(path):
        yield parse_labeled(obj, (str(path), line_number), allow_missing=allow_missing)
