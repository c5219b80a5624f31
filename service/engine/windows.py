"""Cut context windows around term occurrences, in tokens, before encoding.

An occurrence is read in its sentence: that is the context a reader uses and
keeps one forward pass per sentence whatever number of terms it holds. A
sentence longer than the token budget is trimmed to a window centred on its
occurrences (several windows if they are far apart); a sentence shorter than
`min_tokens` is widened into its neighbours. Window edges snap to word starts
so that re-tokenising the window text gives exactly the sub-words the full
text had there.
"""

from __future__ import annotations

import bisect
import re
from collections.abc import Sequence
from dataclasses import dataclass

# A sentence ends at . ! ? (plus closing quotes/brackets) before whitespace and a
# capital, digit or opening quote; a blank line always ends one.
_SENTENCE_END = re.compile(
    r"(?<=[.!?])[\"'\u2019\u201d)\]]*\s+(?=[\"'\u2018\u201c(\[]?[A-Z0-9\u00c0-\u024f])"
    r"|\r?\n[ \t]*\r?\n\s*"
)


def sentence_spans(text: str) -> list[tuple[int, int]]:
    """Character spans of the sentences of `text` (boundary whitespace belongs to none)."""
    spans: list[tuple[int, int]] = []
    start = 0
    for match in _SENTENCE_END.finditer(text):
        if match.start() > start:
            spans.append((start, match.start()))
        start = match.end()
    if start < len(text):
        spans.append((start, len(text)))
    return spans or [(0, len(text))]


@dataclass(frozen=True)
class TextTokens:
    """Sub-word offsets of a whole text (no special tokens) and which of them start a word."""

    starts: list[int]
    ends: list[int]
    word_start: list[bool]

    def __len__(self) -> int:
        return len(self.starts)


@dataclass(frozen=True)
class PlannedWindow:
    """A window to encode: characters [start, end) of the text and the spans it serves."""

    start: int
    end: int
    span_ids: tuple[int, ...]


def _token_range(tokens: TextTokens, start: int, end: int) -> tuple[int, int]:
    """Tokens overlapping [start, end); an empty range at the insertion point if none do."""
    first = bisect.bisect_right(tokens.ends, start)
    last = bisect.bisect_left(tokens.starts, end)
    return first, max(first, last)


def _snap(tokens: TextTokens, lo: int, hi: int, floor: int, ceiling: int) -> tuple[int, int]:
    """Move lo back and hi forward to word starts, within [floor, ceiling]."""
    while lo > floor and not tokens.word_start[lo]:
        lo -= 1
    while hi < ceiling and not tokens.word_start[hi]:
        hi += 1
    return lo, hi


def _widen(tokens: TextTokens, lo: int, hi: int, min_tokens: int) -> tuple[int, int]:
    """Grow [lo, hi) alternately left and right until it holds min_tokens (or the text)."""
    while hi - lo < min_tokens and (lo > 0 or hi < len(tokens)):
        if lo > 0:
            lo -= 1
        if hi < len(tokens) and hi - lo < min_tokens:
            hi += 1
    return lo, hi


def plan_windows(
    text: str,
    tokens: TextTokens,
    spans: Sequence[tuple[int, int]],
    max_tokens: int,
    min_tokens: int = 0,
) -> list[PlannedWindow]:
    """Group spans (character offsets into `text`) into windows of at most ~max_tokens sub-words."""
    if not spans:
        return []
    if len(tokens) == 0:
        return [PlannedWindow(0, len(text), tuple(range(len(spans))))]
    sentences = sentence_spans(text)
    sentence_starts = [s for s, _ in sentences]
    by_sentence: dict[int, list[int]] = {}
    for span_id, (start, _end) in enumerate(spans):
        sentence = max(0, bisect.bisect_right(sentence_starts, start) - 1)
        by_sentence.setdefault(sentence, []).append(span_id)

    windows: list[PlannedWindow] = []
    for sentence, span_ids in sorted(by_sentence.items()):
        s_lo, s_hi = _token_range(tokens, *sentences[sentence])
        ranges = {i: _token_range(tokens, *spans[i]) for i in span_ids}
        # A span running past its sentence keeps all of its tokens.
        s_lo = min([s_lo, *(lo for lo, _ in ranges.values())])
        s_hi = max([s_hi, *(hi for _, hi in ranges.values())])
        if s_hi - s_lo <= max_tokens:
            groups = [sorted(span_ids, key=lambda i: ranges[i])]
        else:
            groups = []
            for i in sorted(span_ids, key=lambda i: ranges[i]):
                if groups and ranges[i][1] - ranges[groups[-1][0]][0] <= max_tokens // 2:
                    groups[-1].append(i)
                else:
                    groups.append([i])
        for group in groups:
            if len(groups) == 1 and s_hi - s_lo <= max_tokens:
                lo, hi = s_lo, s_hi
            else:
                first = ranges[group[0]][0]
                last = max(ranges[i][1] for i in group)
                centre = (first + last) // 2
                lo = max(s_lo, min(first, centre - max_tokens // 2))
                hi = min(s_hi, max(last, lo + max_tokens))
                lo = max(s_lo, min(first, hi - max_tokens))
                lo, hi = _snap(tokens, lo, hi, s_lo, s_hi)
            if hi - lo < min_tokens:
                lo, hi = _snap(tokens, *_widen(tokens, lo, hi, min_tokens), 0, len(tokens))
            start = min(
                [tokens.starts[lo] if lo < len(tokens) else len(text)]
                + [spans[i][0] for i in group]
            )
            end = max([tokens.ends[hi - 1] if hi > lo else start] + [spans[i][1] for i in group])
            windows.append(PlannedWindow(start, end, tuple(group)))
    return windows
