"""`whichsense demo`: the main job end to end on the embedded default.

Migrates a fresh SQLite database, loads the demo inventory, serves the API with
an in-process worker, submits the demo corpus as one batch through the real
HTTP API, follows it with a progress bar, prints what it found and how it
scored on the labeled subset, writes the evaluation report, then keeps serving.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import logging
import sys
import threading
import time
from collections import Counter, defaultdict
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import uvicorn
from sqlalchemy.engine import make_url
from tqdm import tqdm

from service.api.app import create_app
from service.config import Settings, get_settings
from service.store import inventories
from service.store.database import session_scope, upgrade
from service.store.keys import create_key
from service.store.teams import ensure_team

TERMINAL_STATES = {"done", "failed", "cancelled"}


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "demo", help="run the main job on the demo corpus and keep serving the API"
    )
    parser.add_argument(
        "--corpus",
        type=Path,
        default=Path("demo_corpus"),
        help="folder with inventory.json, documents.jsonl, labeled.jsonl",
    )
    parser.add_argument(
        "--output",
        type=Path,
        default=Path("demo-output"),
        help="folder for the results, summary and evaluation report",
    )
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, default=8000)
    parser.add_argument(
        "--fresh",
        action="store_true",
        help="start from an empty SQLite database (deletes the file)",
    )
    parser.add_argument(
        "--exit",
        action="store_true",
        help="stop the server when the run is done instead of serving on",
    )
    parser.add_argument("--no-report", action="store_true", help="skip the evaluation report")
    parser.set_defaults(func=run)


DEMO_TEAM = "demo"
OTHER_TEAM = "demo-neighbours"


def _fresh_sqlite(url: str) -> None:
    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite" or not parsed.database:
        raise ValueError(
            "--fresh only deletes SQLite databases; point WHICHSENSE_DATABASE_URL "
            "at a SQLite file or drop --fresh"
        )
    for suffix in ("", "-wal", "-shm", "-journal"):
        Path(parsed.database + suffix).unlink(missing_ok=True)


class BackgroundServer:
    """uvicorn in a thread, so this command can be its own first client."""

    def __init__(self, settings: Settings, host: str, port: int):
        app = create_app(settings)
        from worker.embedded import attach

        attach(app, settings)
        config = uvicorn.Config(app, host=host, port=port, log_level="warning")
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, name="whichsense-api", daemon=True)
        self.base_url = f"http://{host}:{port}"

    def start(self, timeout: float = 300.0) -> None:
        self.thread.start()
        deadline = time.monotonic() + timeout
        while not self.server.started:
            if not self.thread.is_alive() or time.monotonic() > deadline:
                raise RuntimeError(f"the API did not start on {self.base_url}")
            time.sleep(0.1)

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=90)


def _ndjson_body(inventory: str, documents: Path) -> Iterator[bytes]:
    yield (json.dumps({"inventory": inventory}) + "\n").encode()
    with documents.open("rb") as stream:
        yield from stream


def _follow(client: httpx.Client, status_url: str, total: int) -> dict[str, Any]:
    with tqdm(total=total, unit="doc", desc="tagging", file=sys.stderr) as bar:
        while True:
            status = client.get(status_url).raise_for_status().json()
            counts = status["counts"]
            done = counts["processed_documents"] + counts["failed_documents"]
            bar.update(done - bar.n)
            if status["state"] in TERMINAL_STATES:
                return status
            time.sleep(0.5)


def split_labels(labeled: Path) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """(evidence, held out): labeled occurrences split by document, about half each.

    The split is by a hash of the document id, so no document feeds both halves and
    the held-out accuracy is not flattered by near-duplicate context.
    """
    evidence: list[dict[str, Any]] = []
    held_out: list[dict[str, Any]] = []
    with labeled.open(encoding="utf-8") as stream:
        for line in stream:
            label = json.loads(line)
            digest = hashlib.sha256(label["document_id"].encode()).digest()
            (evidence if digest[0] % 2 == 0 else held_out).append(label)
    return evidence, held_out


def _located_labels(
    corpus: Path, labels: list[dict[str, Any]]
) -> dict[tuple[str, str, int], tuple[str, str]]:
    """Labeled occurrences keyed by (document id, field, start) in the submitted documents."""
    documents = {}
    with (corpus / "documents.jsonl").open(encoding="utf-8") as stream:
        for line in stream:
            doc = json.loads(line)
            documents[doc["id"]] = {"text": doc.get("text", "")} | doc.get("fields", {})
    located = {}
    for label in labels:
        for field, text in documents.get(label.get("document_id"), {}).items():
            at = text.find(label["text"])
            if at >= 0:
                located[(label["document_id"], field, at + label["start"])] = (
                    label["term"],
                    label["sense"],
                )
                break
    return located


def summarise(results: list[dict[str, Any]], labels: dict, status: dict) -> str:
    """The printed summary: per term and sense, shares by status, labeled accuracy."""
    per_sense: dict[str, Counter[str]] = defaultdict(Counter)
    states = Counter(r["status"] for r in results)
    for result in results:
        per_sense[result["term"]][result["sense_id"] or "(abstained)"] += 1
    lines = [
        f"batch {status['id']}: {status['state']}, {len(results)} occurrences in "
        f"{status['counts']['documents']} documents "
        f"({status['counts']['failed_documents']} failed)",
        "",
    ]
    for term in sorted(per_sense):
        senses = ", ".join(f"{sense} {n}" for sense, n in per_sense[term].most_common())
        lines.append(f"  {term:<10} {sum(per_sense[term].values()):>4}   {senses}")
    total = max(len(results), 1)
    lines.append("")
    for state in ("assigned", "review", "abstained"):
        lines.append(f"  {state:<10} {states[state]:>5}  ({states[state] / total:.1%})")
    hits = answered = matched = 0
    for result in results:
        gold = labels.get((result["document_id"], result["field"], result["start"]))
        if gold is None:
            continue
        matched += 1
        if result["sense_id"] is not None:
            answered += 1
            hits += result["sense_id"] == gold[1]
    if matched:
        lines.append("")
        lines.append(
            f"  held-out labels: {matched} of {len(labels)} found in the results; "
            f"accuracy {hits / matched:.1%} (every occurrence counted), "
            f"{hits / max(answered, 1):.1%} of those given a sense"
        )
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    if not args.verbose:  # the progress bar tells the story; per-chunk logs would bury it
        for chatty in ("worker", "service.tagging", "uvicorn"):
            logging.getLogger(chatty).setLevel(logging.WARNING)
    settings = get_settings()
    if args.fresh:
        _fresh_sqlite(settings.database_url)
    upgrade(settings.database_url)
    document = json.loads((args.corpus / "inventory.json").read_text(encoding="utf-8"))
    with session_scope(settings) as session:
        team = ensure_team(session, DEMO_TEAM)
        inventory = inventories.import_inventory_document(session, team.id, document)
        name, version = inventory.name, inventory.version
        admin = create_key(session, team.id, "admin", "demo")
        reviewer = create_key(session, team.id, "review", "demo reviewer")
    print(f"team '{DEMO_TEAM}': inventory '{name}' version {version} loaded", file=sys.stderr)

    server = BackgroundServer(settings, args.host, args.port)
    print(f"starting the API with an in-process worker on {server.base_url} ...", file=sys.stderr)
    server.start()
    try:
        headers = {"Authorization": f"Bearer {admin.token}"}
        evidence, held_out = split_labels(args.corpus / "labeled.jsonl")
        args.output.mkdir(parents=True, exist_ok=True)
        held_out_path = args.output / "held-out-labels.jsonl"
        held_out_path.write_text(
            "".join(json.dumps(label, ensure_ascii=False) + "\n" for label in held_out),
            encoding="utf-8",
        )
        with httpx.Client(base_url=server.base_url, headers=headers, timeout=120) as client:
            client.post(
                f"/v1/inventories/{name}/evidence", json={"occurrences": evidence}
            ).raise_for_status()
            print(
                f"{len(evidence)} labeled occurrences stored as evidence; "
                f"{len(held_out)} held out for scoring",
                file=sys.stderr,
            )
            _calibrate(name)
            submitted = (
                client.post(
                    "/v1/batches",
                    content=_ndjson_body(name, args.corpus / "documents.jsonl"),
                    headers={"Content-Type": "application/x-ndjson"},
                )
                .raise_for_status()
                .json()
            )
            status = _follow(client, submitted["links"]["self"], submitted["counts"]["documents"])
            results_path = args.output / "results.jsonl"
            results = []
            with (
                client.stream(
                    "GET", submitted["links"]["results"], headers={"Accept": "application/x-ndjson"}
                ) as response,
                results_path.open("w", encoding="utf-8") as out,
            ):
                for line in response.raise_for_status().iter_lines():
                    if line.strip():
                        out.write(line + "\n")
                        results.append(json.loads(line))
            _show_isolation(settings, client, submitted["links"]["self"])
        summary = summarise(results, _located_labels(args.corpus, held_out), status)
        print(summary)
        (args.output / "summary.txt").write_text(summary + "\n", encoding="utf-8")
        print(f"\nresults: {results_path}")
        if not args.no_report:
            _write_report(held_out_path, args.output / "report", name)
        print(f"\nwhichsense is serving at {server.base_url}  (API docs: {server.base_url}/docs)")
        print(f"admin API key of team '{DEMO_TEAM}' (it sees this team only): {admin.token}")
        print(f"review queue: {server.base_url}/review  (sign in with: {reviewer.token})")
        if args.exit:
            return 0 if status["state"] == "done" else 1
        print("press Ctrl-C to stop")
        while server.thread.is_alive():
            time.sleep(1)
        return 0
    finally:
        server.stop()


def _show_isolation(settings: Settings, client: httpx.Client, batch_url: str) -> None:
    """A second team on the same service: its admin key cannot see the demo team's batch."""
    with session_scope(settings) as session:
        other = create_key(session, ensure_team(session, OTHER_TEAM).id, "admin", "demo").token
    answer = client.get(batch_url, headers={"Authorization": f"Bearer {other}"})
    print(
        f"team '{OTHER_TEAM}' asks for this batch with its own admin key: HTTP "
        f"{answer.status_code} (each team sees only its own inventories and batches)",
        file=sys.stderr,
    )


def _run_subcommand(*words: str) -> None:
    from service.cli.main import build_parser

    parsed = build_parser().parse_args(list(words))
    status = parsed.func(parsed)
    if status:
        raise RuntimeError(f"`whichsense {' '.join(words)}` failed with status {status}")


def _calibrate(inventory: str) -> None:
    print("fitting the confidence temperature on the evidence ...", file=sys.stderr)
    _run_subcommand("calibrate", inventory, "--team", DEMO_TEAM)


def _write_report(labeled: Path, report: Path, inventory: str) -> None:
    _run_subcommand(
        "evaluate", str(labeled), "--inventory", inventory, "--team", DEMO_TEAM, "-o", str(report)
    )
    print(f"evaluation report: {report / 'report.html'}")
