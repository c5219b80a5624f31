"""The inventory as a spreadsheet: one CSV row per sense.

Columns: term, aliases, case, pos, inflect, sense_id, gloss, examples, tags.
Aliases and tags are separated by `|`; examples by line breaks inside the
cell (spreadsheets keep those). Term-level columns repeat on each row of the
term and must agree. Problems name the row (the header is row 1) and column.
"""

from __future__ import annotations

import csv
import io
from typing import Any

from service.inventory.document import (
    FORMAT,
    InventoryInvalid,
    InventoryProblem,
    validate_inventory_document,
)

COLUMNS = ("term", "aliases", "case", "pos", "inflect", "sense_id", "gloss", "examples", "tags")
_TRUE = {"true", "yes", "1", ""}
_FALSE = {"false", "no", "0"}


def _split(cell: str, separator: str) -> list[str]:
    return [part.strip() for part in cell.split(separator) if part.strip()]


def _row_problem(row: int, column: str, message: str) -> InventoryProblem:
    return InventoryProblem(f"row {row}, column {column}", message)


def read_inventory_csv(text: str, name: str, description: str = "") -> dict[str, Any]:
    """A valid document from CSV text; raises InventoryInvalid naming row and column."""
    document, rows = _csv_to_document(text, name, description)
    problems = [_locate(problem, rows) for problem in validate_inventory_document(document)]
    if problems:
        raise InventoryInvalid(problems)
    return document


def _locate(problem: InventoryProblem, rows: dict[tuple[int, int], int]) -> InventoryProblem:
    """Turn `/terms/2/senses/1/gloss` into `row 7, column gloss`."""
    parts = problem.pointer.strip("/").split("/")
    if len(parts) < 2 or parts[0] != "terms":
        return problem
    term = int(parts[1])
    sense = int(parts[3]) if len(parts) >= 4 and parts[2] == "senses" else 0
    column = parts[4] if len(parts) >= 5 else parts[2] if len(parts) >= 3 else "term"
    column = {"id": "sense_id"}.get(column, column)
    return _row_problem(rows.get((term, sense), 0), column, problem.message)


def _csv_to_document(
    text: str, name: str, description: str
) -> tuple[dict[str, Any], dict[tuple[int, int], int]]:
    reader = csv.DictReader(io.StringIO(text.lstrip("\ufeff")))
    missing = [c for c in ("term", "sense_id", "gloss") if c not in (reader.fieldnames or [])]
    if missing:
        raise InventoryInvalid(
            [InventoryProblem("row 1", f"missing column(s): {', '.join(missing)}")]
        )
    unknown = [c for c in reader.fieldnames or [] if c not in COLUMNS]
    if unknown:
        raise InventoryInvalid([InventoryProblem("row 1", f"unknown column(s): {unknown}")])
    terms: dict[str, dict[str, Any]] = {}
    rows: dict[tuple[int, int], int] = {}
    problems: list[InventoryProblem] = []
    for number, row in enumerate(reader, start=2):
        if None in row:
            problems.append(_row_problem(number, "-", "more cells than columns"))
            continue
        cells = {key: (value or "").strip() for key, value in row.items()}
        if not any(cells.values()):
            continue
        inflect_cell = cells.get("inflect", "").lower()
        if inflect_cell not in _TRUE | _FALSE:
            problems.append(_row_problem(number, "inflect", f"'{inflect_cell}' is not true/false"))
            continue
        term_fields = {
            "term": cells["term"],
            "aliases": _split(cells.get("aliases", ""), "|"),
            "case": cells.get("case") or "insensitive",
            "pos": cells.get("pos") or None,
            "inflect": inflect_cell in _TRUE,
        }
        sense = {
            "id": cells["sense_id"],
            "gloss": cells["gloss"],
            "examples": [
                line.strip() for line in cells.get("examples", "").splitlines() if line.strip()
            ],
            "tags": _split(cells.get("tags", ""), "|"),
        }
        existing = terms.get(cells["term"])
        if existing is None:
            rows[(len(terms), 0)] = number
            terms[cells["term"]] = {**term_fields, "senses": [sense], "_row": number}
            continue
        for column in ("aliases", "case", "pos", "inflect"):
            if existing[column] != term_fields[column]:
                problems.append(
                    _row_problem(
                        number,
                        column,
                        f"differs from row {existing['_row']} for term '{cells['term']}'",
                    )
                )
        rows[(list(terms).index(cells["term"]), len(existing["senses"]))] = number
        existing["senses"].append(sense)
    if problems:
        raise InventoryInvalid(problems)
    document = {
        "format": FORMAT,
        "name": name,
        "description": description,
        "terms": [{k: v for k, v in term.items() if k != "_row"} for term in terms.values()],
    }
    return document, rows


def write_inventory_csv(document: dict[str, Any]) -> str:
    """CSV text for a valid document, one row per sense, readable back by read_inventory_csv."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(COLUMNS)
    for term in document["terms"]:
        for sense in term["senses"]:
            writer.writerow(
                [
                    term["term"],
                    "|".join(term.get("aliases", [])),
                    term.get("case", "insensitive"),
                    term.get("pos") or "",
                    "true" if term.get("inflect", True) else "false",
                    sense["id"],
                    sense["gloss"],
                    "\n".join(sense.get("examples", [])),
                    "|".join(sense.get("tags", [])),
                ]
            )
    return out.getvalue()
