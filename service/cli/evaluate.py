"""`whichsense evaluate LABELED.jsonl --inventory NAME_OR_FILE -o DIR`: score the engine."""

from __future__ import annotations

import argparse
import sys
import time
from collections import Counter
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from service.cli.inventory import load_inventory
from service.cli.teams import add_team_option

if TYPE_CHECKING:
    from service.config import Settings
    from service.engine.types import Evidence, InventorySpec
    from service.evaluation.labeled import LabeledOccurrence


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "evaluate",
        help="score the engine on labeled occurrences and write an HTML report",
        description="Classify every labeled occurrence with the inventory's senses and write "
        "summary.json and a self-contained report.html: accuracy, per-term precision/recall/"
        "F1, confusion matrices, reliability diagram and the review threshold that reaches "
        "the target accuracy.",
    )
    parser.add_argument("labeled", type=Path, help="labeled occurrences (JSON Lines)")
    parser.add_argument("--inventory", required=True, metavar="NAME_OR_FILE",
                        help="an inventory document (.json) or the name of a stored inventory")
    parser.add_argument("-o", "--output", type=Path, required=True, metavar="DIR",
                        help="folder for summary.json and report.html")
    parser.add_argument("--target-accuracy", type=float, default=0.9,
                        help="accuracy the review threshold must reach (default 0.9)")
    parser.add_argument("--evidence", type=Path, metavar="LABELED",
                        help="labeled occurrences (JSON Lines) to use as evidence besides any "
                        "stored; evaluated items among them are left out")
    parser.add_argument("--no-evidence", action="store_true",
                        help="ignore a stored inventory's evidence (glosses and examples only)")
    parser.add_argument("--limit", type=int, metavar="N", help="evaluate the first N only")
    add_team_option(parser)
    parser.set_defaults(func=run)


def match_terms(
    items: list[LabeledOccurrence], spec: InventorySpec, skipped: Counter[str]
) -> list[tuple[LabeledOccurrence, str]]:
    """Labeled items paired with the inventory's spelling of their term; others counted."""
    from service.inventory.document import fold

    terms = {fold(surface): term.term for term in spec.terms
             for surface in (term.term, *term.aliases)}
    matched = []
    for item in items:
        term = terms.get(fold(item.term))
        if term is None:
            skipped["term not in the inventory"] += 1
        else:
            matched.append((item, term))
    return matched


def without_labeled_items(
    evidence: list[Evidence], items: list[LabeledOccurrence], skipped: Counter[str]
) -> list[Evidence]:
    """Stored evidence minus the very occurrences being evaluated (no answer leaks in)."""
    held_out = {(item.text, item.start, item.end) for item in items}
    kept = [e for e in evidence if (e.text, e.start, e.end) not in held_out]
    if len(kept) < len(evidence):
        skipped["stored evidence left out because it is an evaluated item"] = (
            len(evidence) - len(kept))
    return kept


def threshold_warning(summary: dict) -> str | None:
    """A warning when the proposed review threshold rests on too few items, else None."""
    support = summary.get("threshold_support")
    if not support or support["enough"]:
        return None
    low, high = support["accuracy_interval_95"]
    return (
        f"warning: that threshold rests on only {support['items']} items (95% interval of "
        f"their accuracy {low:.2f}-{high:.2f}); label at least {support['minimum_items']} "
        "before relying on it"
    )


def model_name(model_dir: Path) -> str:
    """The title of the model card (`# name` in README.md), else the folder's name."""
    card = model_dir / "README.md"
    if card.is_file():
        for line in card.read_text(encoding="utf-8", errors="replace").splitlines():
            if line.startswith("# ") and line[2:].strip():
                return line[2:].strip()
    return model_dir.name


def run(args: argparse.Namespace, settings: Settings) -> int:
    print("whichsense evaluate: loading the labeled file, inventory and model ...",
          file=sys.stderr, flush=True)
    from service.engine import SpanQuery
    from service.evaluation.evidence_source import labeled_evidence, restrict_to_inventory
    from service.evaluation.labeled import read_labeled
    from service.evaluation.report import (
        Outcome,
        describe_model,
        summarise,
        trust_summary,
        write_report,
    )
    from service.tagging.engines import build_disambiguator

    started = time.perf_counter()
    items = list(read_labeled(args.labeled, allow_missing=True))
    if args.limit is not None:
        items = items[: max(0, args.limit)]
    spec, evidence, source = load_inventory(
        args.inventory, settings, with_evidence=not args.no_evidence, team=args.team
    )
    skipped: Counter[str] = Counter()
    matched = match_terms(items, spec, skipped)
    if not matched:
        print("whichsense: no labeled occurrence names a term of the inventory", file=sys.stderr)
        return 2
    if args.evidence is not None:
        extra = restrict_to_inventory(
            labeled_evidence(read_labeled(args.evidence, allow_missing=True),
                             first_id=max((e.evidence_id for e in evidence), default=0) + 1),
            spec, skipped)
        evidence = [*evidence, *extra]
    evidence = without_labeled_items(evidence, items, skipped)
    print(f"whichsense evaluate: scoring {len(matched)} labeled occurrences ...", file=sys.stderr,
          flush=True)
    disambiguator = build_disambiguator(settings, spec, evidence)
    encoder = disambiguator.encoder
    queries = [SpanQuery(item.text, item.start, item.end, term, document_id=item.occurrence_id)
               for item, term in matched]
    results = disambiguator.classify_spans(queries)
    every = [
        (item.missing_sense, Outcome(
            occurrence_id=item.occurrence_id, term=term, gold=item.sense or "(missing sense)",
            best=result.candidates[0].sense_id, served=result.sense_id,
            confidence=float(result.confidence), status=result.status,
            text=item.text, start=item.start, end=item.end,
        ))
        for (item, term), result in zip(matched, results, strict=True)
    ]
    outcomes = [outcome for missing, outcome in every if not missing]
    missing = [outcome for flagged, outcome in every if flagged]
    if not outcomes:
        print("whichsense: every labeled occurrence is of a missing sense; nothing to score",
              file=sys.stderr)
        return 2
    senses: dict[str, Sequence[str]] = {
        term.term: [sense.sense_id for sense in term.senses] for term in spec.terms
    }
    summary = summarise(outcomes, senses, target_accuracy=args.target_accuracy)
    summary["trust"] = trust_summary(outcomes, missing, disambiguator.trust.to_json())
    meta = {
        "labeled_file": str(args.labeled),
        "inventory": spec.name,
        "inventory_version": spec.version,
        "inventory_source": source,
        "evidence_items": len(evidence),
        "model_id": encoder.model_id,
        "model": describe_model(encoder.model_id, model_name(encoder.model_path)),
        "skipped": dict(skipped),
        "seconds": round(time.perf_counter() - started, 2),
    }
    summary_path, html_path = write_report(args.output, summary, outcomes, meta)
    chosen = summary["threshold_for_target"]
    print(f"accuracy {summary['accuracy']:.3f}  F1 (abstentions unanswered) "
          f"{summary['served']['f1']:.3f}  ECE {summary['ece']:.3f}  n={summary['n']}")
    if chosen:
        print(f"review threshold {chosen['threshold']:.3f} reaches {args.target_accuracy:.0%}: "
              f"{chosen['coverage']:.1%} assigned automatically")
        warning = threshold_warning(summary)
        if warning:
            print(warning, file=sys.stderr)
    else:
        print(f"no review threshold reaches {args.target_accuracy:.0%} accuracy")
    trust = summary["trust"]
    listed, fit = trust["in_inventory"], trust["fit"]
    assigned_accuracy = listed["assigned_accuracy"]
    print(f"served: {listed['assigned_share']:.1%} assigned at accuracy "
          f"{assigned_accuracy if assigned_accuracy is None else round(assigned_accuracy, 3)}, "
          f"{listed['review_share']:.1%} to review, {listed['abstained_share']:.1%} wrongly "
          f"abstained; ECE {listed['ece']:.3f}")
    review = fit["review"]
    if review["guaranteed"]:
        print(f"review threshold {review['threshold']:.3f} guarantees accuracy "
              f">= {review['target_accuracy']:.0%} with probability {1 - review['delta']:.0%} "
              f"({review['labels']} labels)")
    else:
        print(f"review threshold {review['threshold']:.3f} is a conservative default: "
              f"{fit['too_few_labels'] or 'the labels do not certify the target accuracy'}")
    if missing:
        caught = trust["missing_sense"]["abstained_share"]
        print(f"missing-sense occurrences abstained: {caught:.1%} of {len(missing)}")
    print(f"wrote {summary_path} and {html_path}")
    return 0
