"""`whichsense tag DOCS.jsonl --inventory FILE_OR_NAME -o RESULTS.jsonl`: embedded tagging.

No server: the engine runs in this process. Input is read one line at a time
and results are written as they come, so file size does not matter. A line
that is not valid UTF-8, not JSON, or not a document is reported with its line
number; `--on-error fail` (the default) stops and leaves no output file behind,
`--on-error skip` reports it and goes on.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, Any, BinaryIO

from tqdm import tqdm

from service.batches.documents import parse_document
from service.cli.teams import add_team_option, team_id
from service.engine.errors import DocumentTooLarge
from service.engine.types import Document, Evidence, InventorySpec
from service.line_errors import LineError


class InputLineError(LineError):
    """A line of the input cannot be tagged; says which line and why."""


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "tag",
        help="tag the term occurrences of a JSON Lines document file (no server needed)",
        description=__doc__.splitlines()[0] if __doc__ else None,
    )
    parser.add_argument("docs", help="documents, one JSON object per line ('-' for stdin)")
    parser.add_argument(
        "--inventory", required=True, help="an inventory document file, or an inventory name"
    )
    parser.add_argument(
        "-o", "--output", required=True, help="results file, JSON Lines ('-' for stdout)"
    )
    parser.add_argument(
        "--on-error",
        choices=("fail", "skip"),
        default="fail",
        help="on a bad input line: stop with no output (fail, default) or report and go on",
    )
    parser.add_argument("--no-rationale", action="store_true", help="leave out rationales (faster)")
    parser.add_argument(
        "--no-erasure",
        action="store_true",
        help="leave out the erasure rationale of review occurrences (much faster)",
    )
    parser.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    add_team_option(parser)
    parser.set_defaults(func=run)


def document_from_json(data: Any) -> Document:
    """A Document from one parsed input line, by the batch API's rules (DocumentInvalid if not).

    The size limit is left to the engine's own check, which the caller runs.
    """
    return parse_document(data, max_document_bytes=sys.maxsize).to_engine()


def read_documents(
    handle: BinaryIO,
    source: str,
    on_error: str,
    problems: Counter[str],
    progress: tqdm | None = None,
    check: Any = None,
) -> Iterator[Document]:
    """Documents from a JSON Lines byte stream, one line at a time.

    Bad lines raise InputLineError, or with on_error="skip" are reported on
    stderr, counted in `problems` and left out. `check(document)` may raise
    DocumentTooLarge, handled the same way.
    """
    first_seen: dict[str, int] = {}
    for line_number, raw in enumerate(handle, start=1):
        if progress is not None:
            progress.update(len(raw))
        try:
            try:
                line = raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                raise InputLineError(
                    source, line_number, f"invalid UTF-8 at byte {exc.start} of the line"
                ) from None
            if not line.strip():
                continue
            try:
                data = json.loads(line)
            except json.JSONDecodeError as exc:
                raise InputLineError(
                    source, line_number, f"malformed JSON: {exc.msg} (column {exc.colno})"
                ) from None
            try:
                document = document_from_json(data)
                if document.doc_id in first_seen:
                    raise ValueError(
                        f"duplicate id {document.doc_id!r} (first on line "
                        f"{first_seen[document.doc_id]})"
                    )
                if check is not None:
                    check(document)
                first_seen[document.doc_id] = line_number
            except DocumentTooLarge as exc:
                raise InputLineError(source, line_number, str(exc)) from None
            except ValueError as exc:
                raise InputLineError(source, line_number, f"not a document: {exc}") from None
        except InputLineError as exc:
            if on_error == "fail":
                raise
            problems["skipped lines"] += 1
            _say(f"skipped {exc}", progress)
            continue
        yield document


def _say(message: str, progress: tqdm | None) -> None:
    if progress is not None:
        progress.write(f"whichsense tag: {message}", file=sys.stderr)
    else:
        print(f"whichsense tag: {message}", file=sys.stderr)


def load_inventory(reference: str, team: str | None = None) -> tuple[InventorySpec, list[Evidence]]:
    """An inventory from a document file, or by name (with its evidence) from the database."""
    path = Path(reference)
    if path.is_file():
        from service.inventory.document import parse_inventory_document

        with path.open(encoding="utf-8") as handle:
            return parse_inventory_document(json.load(handle)), []
    from service.store.database import session_scope
    from service.store.evidence import load_evidence
    from service.store.inventories import get_inventory, load_inventory_spec

    with session_scope() as session:
        chosen = team_id(session, team)
        spec = load_inventory_spec(session, chosen, reference)
        evidence = load_evidence(session, get_inventory(session, chosen, reference).id)
    return spec, evidence


@contextmanager
def _input(name: str) -> Iterator[tuple[BinaryIO, int | None]]:
    if name == "-":
        yield sys.stdin.buffer, None
        return
    path = Path(name)
    with path.open("rb") as handle:
        yield handle, path.stat().st_size


@contextmanager
def _output(name: str) -> Iterator[IO[str]]:
    """Write to a temporary file beside the target, renamed into place only on success."""
    if name == "-":
        yield sys.stdout
        return
    target = Path(name)
    fd, temporary = tempfile.mkstemp(
        prefix=f".{target.name}.", suffix=".partial", dir=target.parent
    )
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            yield handle
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def run(args: argparse.Namespace) -> int:
    from service.config import get_settings, resolve_model_dir
    from service.engine.disambiguator import Disambiguator
    from service.engine.encoder import ContextEncoder

    inventory, evidence = load_inventory(args.inventory, args.team)
    settings = get_settings()
    encoder = ContextEncoder(resolve_model_dir(settings))
    # The engine counts characters; a document within the byte limit is within this one too.
    disambiguator = Disambiguator(
        encoder,
        inventory,
        max_document_chars=settings.max_document_bytes,
        erasure_for=frozenset() if args.no_erasure else frozenset({"review"}),
    )
    if evidence:
        disambiguator.prototypes.add_evidence(evidence, encoder=encoder, skip_unknown=True)
    problems: Counter[str] = Counter()
    statuses: Counter[str] = Counter()
    documents = 0
    try:
        with _input(args.docs) as (handle, size), _output(args.output) as out:
            progress = None
            if not args.no_progress:
                progress = tqdm(total=size, unit="B", unit_scale=True, file=sys.stderr, desc="tag")
            try:
                stream = read_documents(
                    handle,
                    args.docs,
                    args.on_error,
                    problems,
                    progress,
                    check=disambiguator.check_size,
                )
                for result in disambiguator.tag(stream, rationale=not args.no_rationale):
                    documents += 1
                    for occurrence in result.occurrences:
                        statuses[occurrence.status] += 1
                        out.write(json.dumps(occurrence.to_json(), ensure_ascii=False))
                        out.write("\n")
            finally:
                if progress is not None:
                    progress.close()
    except InputLineError as exc:
        print(f"whichsense tag: {exc}", file=sys.stderr)
        print(
            "whichsense tag: stopped; no results written (use --on-error skip to go on)",
            file=sys.stderr,
        )
        return 1
    summary = ", ".join(f"{count} {status}" for status, count in sorted(statuses.items()))
    print(
        f"whichsense tag: {documents} documents, {sum(statuses.values())} occurrences"
        f"{' (' + summary + ')' if summary else ''}"
        f"{', ' + str(problems['skipped lines']) + ' lines skipped' if problems else ''}",
        file=sys.stderr,
    )
    return 0
