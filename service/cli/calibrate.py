"""`whichsense calibrate NAME`: fit an inventory's temperature on its own labeled evidence.

Temperature scaling (Guo et al. 2017) on leave-one-out scores of the stored
evidence: each labeled occurrence is scored against prototypes rebuilt without
it, so the fitted confidence reflects occurrences the engine has not seen. The
fitted temperature is stored in the inventory's settings (a new version).
"""

from __future__ import annotations

import argparse

from service.cli.teams import add_team_option, team_id
from service.config import get_settings, resolve_model_dir
from service.engine import DEFAULT_TEMPERATURE, PrototypeBook, calibrate_book
from service.store import inventories
from service.store.database import session_scope
from service.store.evidence import load_evidence
from service.tagging.engines import shared_engines


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "calibrate", help="fit an inventory's confidence temperature on its labeled evidence"
    )
    parser.add_argument("name", help="a stored inventory")
    parser.add_argument("--dry-run", action="store_true", help="report without storing")
    add_team_option(parser)
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    settings = get_settings()
    with session_scope(settings) as session:
        team = team_id(session, args.team)
        spec = inventories.load_inventory_spec(session, team, args.name)
        inventory_id = inventories.get_inventory(session, team, args.name).id
        evidence = load_evidence(session, inventory_id)
    if not evidence:
        print(
            f"whichsense: inventory '{args.name}' has no labeled evidence to calibrate on; "
            "add some (POST /v1/inventories/{name}/evidence or `whichsense evidence import`)"
        )
        return 2
    encoder = shared_engines().encoder(resolve_model_dir(settings))
    book = PrototypeBook.build(encoder, spec, evidence)
    current = spec.settings.temperature or DEFAULT_TEMPERATURE
    report = calibrate_book(book, current)
    print(f"{report.instances} labeled occurrences (leave-one-out), accuracy {report.accuracy:.3f}")
    print(f"temperature {current:.4f} -> {report.temperature:.4f}")
    print(f"negative log-likelihood {report.nll_before:.4f} -> {report.nll_after:.4f}")
    print(f"expected calibration error {report.ece_before:.4f} -> {report.ece_after:.4f}")
    if args.dry_run:
        return 0
    with session_scope(settings) as session:
        inventory = inventories.edit_inventory(
            session,
            team,
            args.name,
            lambda document: document["settings"].update(temperature=report.temperature),
        )
        print(f"stored in inventory '{args.name}' version {inventory.version}")
    return 0
