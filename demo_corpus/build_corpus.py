"""Assemble documents.jsonl and labeled.jsonl from the hand-written batches in source/.

The batches are plain text so the prose stays readable and easy to edit. Gold senses are
marked inline where the text was written, as ``[[surface|sense.id]]``; this script strips the
marks, so offsets are always computed by code, and cuts the sentence around each mark into a
labeled occurrence. Run from anywhere: ``python demo_corpus/build_corpus.py [--unmarked]``.

Batch syntax: a line ``@@ KIND DEPARTMENT [key=value ...] [crlf]`` starts a document; lines
``title: ...`` or ``subject: ...`` directly after it become named fields; the rest is the text.
"""

from __future__ import annotations

import json
import random
import re
import sys
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent
MARK = re.compile(r"\[\[([^|\]]+)\|([a-z_]+\.[a-z_-]+)\]\]")
FIELD_LINE = re.compile(r"^(title|subject): (.+)$")
SENTENCE_END = re.compile(r"(?<=[.!?])[\"')]?\s+|\r?\n")
PARAGRAPH_BREAK = re.compile(r"\r?\n[ \t]*\r?\n")
MIN_PASSAGE_WORDS = 12
SHUFFLE_SEED = 20240611
IRREGULAR = {"mouse": {"mice"}}


@dataclass
class Span:
    field: str
    start: int
    end: int
    sense: str


@dataclass
class SourceDoc:
    kind: str
    department: str
    metadata: dict[str, object]
    crlf: bool
    fields: dict[str, str] = field(default_factory=dict)
    spans: list[Span] = field(default_factory=list)
    origin: str = ""


def word_forms(word: str) -> set[str]:
    """Plain English inflections, enough to recognise the marked surfaces."""
    forms = {word, word + "s", word + "es", word + "'s", word + "s'", word + "ed", word + "d",
             word + "ing"}
    if word.endswith("y"):
        forms |= {word[:-1] + "ies", word[:-1] + "ied"}
    if word.endswith("e"):
        forms.add(word[:-1] + "ing")
    if re.search(r"[^aeiou][aeiou][bdgklmnprt]$", word):
        forms |= {word + word[-1] + "ed", word + word[-1] + "ing"}
    return forms


def surface_forms(term: dict) -> set[str]:
    forms: set[str] = set()
    for base in [term["term"], *term.get("aliases", [])]:
        head, _, last = base.lower().rpartition(" ")
        prefix = head + " " if head else ""
        forms |= {prefix + f for f in word_forms(last) | IRREGULAR.get(last, set())}
    return forms


def load_inventory() -> tuple[dict[str, dict], list[str]]:
    inventory = json.loads((HERE / "inventory.json").read_text(encoding="utf-8"))
    sense_term = {s["id"]: t for t in inventory["terms"] for s in t["senses"]}
    examples = [e for t in inventory["terms"] for s in t["senses"] for e in s["examples"]]
    return sense_term, examples


def strip_marks(marked: str) -> tuple[str, list[tuple[int, int, str]]]:
    out: list[str] = []
    spans: list[tuple[int, int, str]] = []
    pos = 0
    length = 0
    for m in MARK.finditer(marked):
        out.append(marked[pos:m.start()])
        length += m.start() - pos
        surface = m.group(1)
        spans.append((length, length + len(surface), m.group(2)))
        out.append(surface)
        length += len(surface)
        pos = m.end()
    out.append(marked[pos:])
    return "".join(out), spans


def metadata_value(raw: str) -> object:
    if re.fullmatch(r"\d+", raw):
        return int(raw)
    if re.fullmatch(r"\d+\.\d+", raw):
        return float(raw)
    return raw.replace("_", " ")


def parse_batch(path: Path) -> list[SourceDoc]:
    docs: list[SourceDoc] = []
    current: SourceDoc | None = None
    body: list[str] = []

    def finish() -> None:
        if current is None:
            return
        while body and not body[-1].strip():
            body.pop()
        while body and not body[0].strip():
            body.pop(0)
        newline = "\r\n" if current.crlf else "\n"
        if body:
            current.fields["text"] = newline.join(body)
        docs.append(current)

    lines = path.read_text(encoding="utf-8").split("\n")
    for number, line in enumerate(lines, 1):
        if line.startswith("@@ "):
            finish()
            parts = line[3:].split()
            meta: dict[str, object] = {}
            crlf = False
            for extra in parts[2:]:
                if extra == "crlf":
                    crlf = True
                else:
                    key, _, value = extra.partition("=")
                    meta[key] = metadata_value(value)
            current = SourceDoc(parts[0], parts[1], meta, crlf, origin=f"{path.name}:{number}")
            body = []
            continue
        if current is None:
            continue
        named = FIELD_LINE.match(line)
        if named and not body and "text" not in current.fields:
            current.fields[named.group(1)] = named.group(2).strip()
            continue
        body.append(line)
    finish()
    return docs


def resolve_marks(doc: SourceDoc) -> None:
    for name in list(doc.fields):
        plain, spans = strip_marks(doc.fields[name])
        doc.fields[name] = plain
        doc.spans += [Span(name, s, e, sense) for s, e, sense in spans]


def sentence_spans(text: str, lo: int, hi: int) -> list[tuple[int, int]]:
    spans = []
    start = lo
    for m in SENTENCE_END.finditer(text, lo, hi):
        spans.append((start, m.start()))
        start = m.end()
    spans.append((start, hi))
    return [(s, e) for s, e in spans if text[s:e].strip()]


def passage(text: str, start: int, end: int) -> tuple[int, int]:
    """The sentence holding [start, end), widened inside its paragraph until it has context."""
    lo, hi = 0, len(text)
    for m in PARAGRAPH_BREAK.finditer(text):
        if m.end() <= start:
            lo = m.end()
        elif m.start() >= end:
            hi = m.start()
            break
    sentences = sentence_spans(text, lo, hi)
    index = next(i for i, (s, e) in enumerate(sentences) if s <= start and end <= e)
    first = last = index

    def words() -> int:
        return len(text[sentences[first][0]:sentences[last][1]].split())

    while words() < MIN_PASSAGE_WORDS and (first > 0 or last < len(sentences) - 1):
        if first > 0:
            first -= 1
        if words() < MIN_PASSAGE_WORDS and last < len(sentences) - 1:
            last += 1
    s, e = sentences[first][0], sentences[last][1]
    while s < start and text[s].isspace():
        s += 1
    while e > end and text[e - 1].isspace():
        e -= 1
    return s, e


@dataclass
class Assembly:
    """What the batches turn into: JSON Lines for both files, or the problems found."""

    docs: list[SourceDoc]
    document_lines: list[str]
    labeled_lines: list[str]
    problems: list[str]


def check_marks(docs: list[SourceDoc], sense_term: dict[str, dict],
                examples: list[str]) -> list[str]:
    problems: list[str] = []
    for doc in docs:
        for name, value in doc.fields.items():
            if "[[" in value or "]]" in value or "|" in value:
                problems.append(f"{doc.origin}: stray mark-up in {name}")
            lowered = value.lower()
            problems += [f"{doc.origin}: contains example {ex!r}" for ex in examples
                         if ex.lower() in lowered]
        for span in doc.spans:
            term = sense_term.get(span.sense)
            surface = doc.fields[span.field][span.start:span.end]
            if term is None:
                problems.append(f"{doc.origin}: unknown sense {span.sense}")
            elif surface.lower() not in surface_forms(term):
                problems.append(f"{doc.origin}: {surface!r} is not a form of {term['term']!r}")
    return problems


def assemble(source_dir: Path = HERE / "source") -> Assembly:
    """Parse every batch, resolve the marks and lay out both files in a fixed shuffled order."""
    sense_term, examples = load_inventory()
    docs: list[SourceDoc] = []
    for path in sorted(source_dir.glob("batch_*.txt")):
        docs += parse_batch(path)
    for doc in docs:
        resolve_marks(doc)
    problems = check_marks(docs, sense_term, examples)
    random.Random(SHUFFLE_SEED).shuffle(docs)
    document_lines: list[str] = []
    labeled: list[dict[str, object]] = []
    for number, doc in enumerate(docs, 1):
        doc_id = f"ll-{number:04d}"
        record: dict[str, object] = {"id": doc_id}
        if "text" in doc.fields:
            record["text"] = doc.fields["text"]
        named = {k: v for k, v in doc.fields.items() if k != "text"}
        if named:
            record["fields"] = named
        record["metadata"] = {"kind": doc.kind, "department": doc.department, **doc.metadata}
        document_lines.append(json.dumps(record, ensure_ascii=False))
        for span in sorted(doc.spans, key=lambda sp: (sp.field == "text", sp.field, sp.start)):
            if span.sense not in sense_term:
                continue
            text = doc.fields[span.field]
            s, e = passage(text, span.start, span.end)
            labeled.append({
                "text": text[s:e], "start": span.start - s, "end": span.end - s,
                "term": sense_term[span.sense]["term"], "sense": span.sense,
                "document_id": doc_id,
            })
    labeled_lines = [json.dumps({"id": f"lab-{n:04d}", **item}, ensure_ascii=False)
                     for n, item in enumerate(labeled, 1)]
    return Assembly(docs, document_lines, labeled_lines, problems)


def main(argv: list[str]) -> int:
    built = assemble()
    if built.problems:
        print("\n".join(built.problems))
        return 1
    (HERE / "documents.jsonl").write_text("\n".join(built.document_lines) + "\n",
                                          encoding="utf-8")
    (HERE / "labeled.jsonl").write_text("\n".join(built.labeled_lines) + "\n",
                                        encoding="utf-8")
    sense_term, _ = load_inventory()
    print(f"{len(built.document_lines)} documents, {len(built.labeled_lines)} labeled occurrences")
    print("kinds:", dict(Counter(d.kind for d in built.docs)))
    print("departments:", dict(Counter(d.department for d in built.docs)))
    sense_counts = Counter(json.loads(line)["sense"] for line in built.labeled_lines)
    for sense in sorted(sense_term):
        print(f"  {sense:22s} {sense_counts.get(sense, 0)}")
    if "--unmarked" in argv:
        report_unmarked(built.docs, sense_term)
    return 0


def report_unmarked(docs: list[SourceDoc], sense_term: dict[str, dict]) -> None:
    """List term occurrences left unlabeled, to be read and either marked or left alone."""
    terms = {t["term"]: t for t in sense_term.values()}
    for doc in docs:
        marked = {(sp.field, sp.start) for sp in doc.spans}
        for name, text in doc.fields.items():
            for term in terms.values():
                forms = sorted(surface_forms(term), key=len, reverse=True)
                pattern = r"\b(" + "|".join(re.escape(f) for f in forms) + r")\b"
                for m in re.finditer(pattern, text, re.IGNORECASE):
                    if (name, m.start()) not in marked:
                        context = text[max(0, m.start() - 50):m.end() + 50].replace("\n", " ")
                        print(f"UNMARKED {doc.origin} [{term['term']}] ...{context}...")


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
