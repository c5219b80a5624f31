"""Find every occurrence of an inventory's terms in a document.

Text is cut into *pieces*: maximal runs of word characters (letters, digits,
underscore and combining marks, so an NFD "café" stays one word) and single
other non-space characters. A term is matched piece by piece, which makes the
finder word-boundary aware for free ("bass" never matches inside "bassoon") and
keeps every offset an index into the original string, whatever its
normalisation: pieces are compared after NFC (and case folding for terms whose
case rule is "insensitive"), but offsets come from the untouched text.

Inflected forms are recognised with WordNet's morphy (exception lists plus
detachment rules) through NLTK, never with home-made suffix rules: a text word
matches a term's head word when morphy analyses it to that head. Heads WordNet
does not know (product names, jargon) are matched by morphy's rules without its
dictionary filter, unless the text word is itself a WordNet lemma ("news" is
not the plural of an unknown "new"). Only the last word of a multi-word term
inflects ("spring rolls"), and a possessive "'s" or bare "'" after the match is
part of the surface.

Overlaps are resolved longest-first, then leftmost, so "spring roll" beats
"roll" and no two occurrences share a character.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from nltk.corpus.reader.wordnet import WordNetCorpusReader

from .lexicon import open_wordnet
from .types import CaseRule, Document, InventorySpec, Occurrence, TermSpec

# Combining marks count as word characters so decomposed letters stay inside words.
_COMBINING = "\u0300-\u036f\u1ab0-\u1aff\u1dc0-\u1dff\u20d0-\u20ff\ufe20-\ufe2f"
_PIECE = re.compile(rf"(?P<word>[\w{_COMBINING}]+)|\S")
_APOSTROPHES = frozenset("'\u2019")
_MORPHY_POS = ("n", "v", "a", "r")


@dataclass(frozen=True)
class Piece:
    """A word or a single non-space character, with its offsets in the original text."""

    start: int
    end: int
    text: str
    is_word: bool


def split_pieces(text: str) -> list[Piece]:
    """Cut `text` into pieces; whitespace separates pieces and belongs to none."""
    return [
        Piece(m.start(), m.end(), m.group(), m.lastgroup == "word") for m in _PIECE.finditer(text)
    ]


def fold(text: str, case: CaseRule) -> str:
    """The comparison key of a piece: NFC, and case-folded unless the case rule is exact."""
    normal = unicodedata.normalize("NFC", text)
    return normal.casefold() if case == "insensitive" else normal


def _case_shape_matches(surface: str, head: str) -> bool:
    """For exact-case terms, an inflected surface must keep the head's capitalisation."""
    if head.islower():
        return surface.islower()
    if head.isupper():
        return surface.isupper()
    if head.istitle():
        return surface.istitle()
    return surface.startswith(head)


@dataclass(frozen=True)
class _Pattern:
    """One surface form (term or alias) of a term, ready for piece-wise matching."""

    term: str
    order: int  # inventory order of the term, breaks ties between equal spans
    keys: tuple[str, ...]  # folded pieces
    exact: tuple[str, ...]  # NFC pieces as written
    spaced: tuple[bool, ...]  # whether whitespace precedes piece i (always False for i=0)
    case: CaseRule
    inflect_pos: tuple[str, ...]  # parts of speech whose inflections the head may take

    @property
    def head_inflects(self) -> bool:
        return bool(self.inflect_pos) and self.exact[-1].isalpha()


class OccurrenceFinder:
    """Matches an inventory's terms and aliases in text; build once, reuse for many documents."""

    def __init__(self, inventory: InventorySpec, wordnet: WordNetCorpusReader | None = None):
        self._wordnet = wordnet if wordnet is not None else open_wordnet()
        self._patterns: dict[str, list[_Pattern]] = {}
        self._analysis_cache: dict[str, dict[str, tuple[frozenset[str], frozenset[str]]]] = {}
        self._inflecting_heads: set[str] = set()
        for order, spec in enumerate(inventory.terms):
            for surface in dict.fromkeys((spec.term, *spec.aliases)):
                pattern = self._compile(spec, surface, order)
                if pattern is None:
                    continue
                # Indexed case-folded whatever the case rule; _match_at applies the rule.
                self._patterns.setdefault(pattern.keys[0].casefold(), []).append(pattern)
                if len(pattern.keys) == 1 and pattern.head_inflects:
                    self._inflecting_heads.add(pattern.keys[0].casefold())

    def _compile(self, spec: TermSpec, surface: str, order: int) -> _Pattern | None:
        pieces = split_pieces(surface)
        if not pieces:
            return None
        spaced = tuple(i > 0 and pieces[i - 1].end < pieces[i].start for i in range(len(pieces)))
        return _Pattern(
            term=spec.term,
            order=order,
            keys=tuple(fold(p.text, spec.case) for p in pieces),
            exact=tuple(fold(p.text, "exact") for p in pieces),
            spaced=spaced,
            case=spec.case,
            inflect_pos=self._inflection_pos(spec, pieces[-1]) if spec.inflect else (),
        )

    def _inflection_pos(self, spec: TermSpec, head: Piece) -> tuple[str, ...]:
        """Parts of speech whose inflections apply: the given one, else noun (+ verb if known)."""
        if not head.is_word:
            return ()
        if spec.pos is not None:
            return (spec.pos,)
        lemma = head.text.casefold()
        if self._wordnet_knows(lemma, "v"):
            return ("n", "v")
        return ("n",)

    def _wordnet_knows(self, lemma: str, pos: str) -> bool:
        return pos in self._wordnet._lemma_pos_offset_map.get(lemma, {})

    def _analyses(self, word: str) -> dict[str, tuple[frozenset[str], frozenset[str]]]:
        """Possible base forms of a case-folded word per part of speech, by WordNet's morphy.

        Per pos: morphy's dictionary-checked analyses, and (only when the word is
        not itself a WordNet lemma) the unfiltered outputs of morphy's exception
        lists and detachment rules, which let heads unknown to WordNet inflect.
        """
        cached = self._analysis_cache.get(word)
        if cached is not None:
            return cached
        known_word = word in self._wordnet._lemma_pos_offset_map
        result: dict[str, tuple[frozenset[str], frozenset[str]]] = {}
        for pos in _MORPHY_POS:
            checked = set(self._wordnet._morphy(word, pos))
            loose: set[str] = set()
            if not known_word:
                loose.update(self._wordnet._exception_map[pos].get(word, ()))
                loose.update(
                    word[: len(word) - len(old)] + new
                    for old, new in self._wordnet.MORPHOLOGICAL_SUBSTITUTIONS[pos]
                    if word.endswith(old) and len(word) > len(old)
                )
            checked.discard(word)
            loose.discard(word)
            if checked or loose:
                result[pos] = (frozenset(checked), frozenset(loose))
        if len(self._analysis_cache) > 200_000:
            self._analysis_cache.clear()
        self._analysis_cache[word] = result
        return result

    def _head_matches(self, pattern: _Pattern, piece: Piece) -> bool:
        """Does `piece` carry the pattern's last piece, as written or inflected?"""
        if fold(piece.text, pattern.case) == pattern.keys[-1]:
            return True
        if not (pattern.head_inflects and piece.is_word):
            return False
        surface = unicodedata.normalize("NFC", piece.text)
        head = pattern.exact[-1].casefold()
        analyses = self._analyses(surface.casefold())
        for pos in pattern.inflect_pos:
            checked, loose = analyses.get(pos, (frozenset(), frozenset()))
            bases = checked if self._wordnet_knows(head, pos) else loose
            if head not in bases:
                continue
            if pattern.case == "exact" and not _case_shape_matches(surface, pattern.exact[-1]):
                continue
            return True
        return False

    def _match_at(self, pieces: Sequence[Piece], i: int, pattern: _Pattern) -> int | None:
        """Index one past the last piece of a match of `pattern` starting at piece i, or None."""
        n = len(pattern.keys)
        if i + n > len(pieces):
            return None
        for j in range(n):
            piece = pieces[i + j]
            if j > 0 and (pieces[i + j - 1].end < piece.start) != pattern.spaced[j]:
                return None
            if j == n - 1:
                if not self._head_matches(pattern, piece):
                    return None
            elif fold(piece.text, pattern.case) != pattern.keys[j]:
                return None
        return i + n

    @staticmethod
    def _possessive_end(pieces: Sequence[Piece], after: int, inflect: bool) -> int:
        """Extend a match over a following "'s" (or a bare "'" after s); returns the end piece."""
        if not inflect or after >= len(pieces):
            return after
        last, mark = pieces[after - 1], pieces[after]
        if mark.text not in _APOSTROPHES or mark.start != last.end:
            return after
        nxt = pieces[after + 1] if after + 1 < len(pieces) else None
        if nxt is not None and nxt.start == mark.end and nxt.is_word:
            return after + 2 if nxt.text in ("s", "S") else after
        return after + 1 if last.text[-1:] in ("s", "S") else after

    def _candidates(
        self, pieces: Sequence[Piece], only: frozenset[str] | None
    ) -> list[tuple[int, int, _Pattern]]:
        """Every (first piece, one past last piece, pattern) match, overlaps included."""
        found: list[tuple[int, int, _Pattern]] = []
        for i, piece in enumerate(pieces):
            folded = fold(piece.text, "insensitive")
            keys = {folded}
            if piece.is_word and self._inflecting_heads:
                for checked, loose in self._analyses(folded).values():
                    keys.update((checked | loose) & self._inflecting_heads)
            for key in keys:
                for pattern in self._patterns.get(key, ()):
                    if only is not None and pattern.term not in only:
                        continue
                    end = self._match_at(pieces, i, pattern)
                    if end is None:
                        continue
                    end = self._possessive_end(pieces, end, bool(pattern.inflect_pos))
                    found.append((i, end, pattern))
        return found

    def find_in_text(
        self, text: str, terms: Iterable[str] | None = None
    ) -> list[tuple[int, int, str]]:
        """Non-overlapping (start, end, term) matches in `text`, in offset order.

        `terms` restricts matching to those terms (e.g. to locate one term in its
        own example sentence even where another term shares its surface).
        """
        if not text or not self._patterns:
            return []
        pieces = split_pieces(text)
        only = frozenset(terms) if terms is not None else None
        best: dict[tuple[int, int], _Pattern] = {}
        for first, stop, pattern in self._candidates(pieces, only):
            previous = best.get((first, stop))
            if previous is None or pattern.order < previous.order:
                best[(first, stop)] = pattern
        taken = bytearray(len(pieces))
        chosen: list[tuple[int, int, str]] = []
        for (first, stop), pattern in sorted(
            best.items(),
            key=lambda item: (pieces[item[0][0]].start - pieces[item[0][1] - 1].end, item[0][0]),
        ):
            if any(taken[first:stop]):
                continue
            taken[first:stop] = b"\x01" * (stop - first)
            chosen.append((pieces[first].start, pieces[stop - 1].end, pattern.term))
        chosen.sort()
        return chosen

    def find(self, document: Document) -> list[Occurrence]:
        """Every occurrence in every field, indexed in field order then offset order."""
        occurrences: list[Occurrence] = []
        for field_name, text in document.fields:
            for start, end, term in self.find_in_text(text):
                occurrences.append(
                    Occurrence(
                        field=field_name,
                        start=start,
                        end=end,
                        surface=text[start:end],
                        term=term,
                        index=len(occurrences),
                    )
                )
        return occurrences


def find_occurrences(
    inventory: InventorySpec, documents: Iterable[Document]
) -> list[list[Occurrence]]:
    """Convenience: occurrences of each document, with a finder built once."""
    finder = OccurrenceFinder(inventory)
    return [finder.find(document) for document in documents]
