"""Measure the sentence channel's weight with `whichsense evaluate` on held-out inventories.

Protocol (as research/trust_sweep.py): odd ids are scored; cold start uses the
inventory's glosses and examples only, "half" gives every even in-inventory id
as evidence (`--evidence`). With --by-document (the demo corpus) the split is the
demo's: labels of about half the documents (by a hash of the id) are evidence.
The inventory document is written once per weight with `settings.sentence_weight`
set, so the documented command path is measured.

    .venv/bin/python research/measure_sentence_channel.py \
        research/data/brackenford ../shared/data/domain-dev --weights 0 0.5 1 2
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path


def split(labeled: Path, folder: Path, by_document: bool) -> tuple[Path, Path]:
    if by_document:  # the demo's split: half the documents' labels are evidence
        from service.cli.demo import split_labels

        even, odd = split_labels(labeled)
    else:
        rows = [json.loads(line) for line in labeled.read_text("utf-8").splitlines()
                if line.strip()]
        number = [int(str(row["id"]).rsplit("-", 1)[-1]) for row in rows]
        odd = [row for row, n in zip(rows, number, strict=True) if n % 2 == 1]
        even = [row for row, n in zip(rows, number, strict=True) if n % 2 == 0 and row["sense"]]
    scored, evidence = folder / "odd.jsonl", folder / "even.jsonl"
    scored.write_text("".join(json.dumps(row) + "\n" for row in odd), "utf-8")
    evidence.write_text("".join(json.dumps(row) + "\n" for row in even), "utf-8")
    return scored, evidence


def evaluate(inventory: Path, scored: Path, evidence: Path | None, out: Path) -> dict:
    command = [sys.executable, "-m", "service.cli.main", "evaluate", str(scored),
               "--inventory", str(inventory), "-o", str(out)]
    if evidence is not None:
        command += ["--evidence", str(evidence)]
    subprocess.run(command, check=True, capture_output=True)
    summary = json.loads((out / "summary.json").read_text("utf-8"))
    trust = summary["trust"]
    return {
        "accuracy": summary["accuracy"],
        "assigned_share": trust["in_inventory"]["assigned_share"],
        "assigned_accuracy": trust["in_inventory"]["assigned_accuracy"],
        "review_share": trust["in_inventory"]["review_share"],
        "ece": summary["ece"],
        "missing_abstained": trust["missing_sense"]["abstained_share"],
        "n": summary["n"],
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("sets", nargs="+", type=Path,
                        help="folders with inventory.json and labeled.jsonl")
    parser.add_argument("--weights", nargs="+", type=float, default=[0.0, 0.5, 1.0, 2.0])
    parser.add_argument("--by-document", action="store_true",
                        help="split as the demo does (by document hash), not by odd/even id")
    args = parser.parse_args()
    for folder in args.sets:
        document = json.loads((folder / "inventory.json").read_text("utf-8"))
        with tempfile.TemporaryDirectory() as temporary:
            work = Path(temporary)
            scored, evidence = split(folder / "labeled.jsonl", work, args.by_document)
            for weight in args.weights:
                document.setdefault("settings", {})["sentence_weight"] = weight
                inventory = work / f"inventory-{weight}.json"
                inventory.write_text(json.dumps(document), "utf-8")
                for mode, given in (("cold", None), ("half", evidence)):
                    figures = evaluate(inventory, scored, given, work / f"out-{weight}-{mode}")
                    print(json.dumps({"set": document["name"], "weight": weight, "mode": mode,
                                      **figures}), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
