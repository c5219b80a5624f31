"""`whichsense calibrate NAME`: fit an inventory's temperature on its own labeled items.

Temperature scaling (Guo et al. 2017) on cross-fitted scores of the
inventory's example sentences and stored evidence: each item is scored against
prototypes rebuilt without it. The fit is shown before and after (calibration
error measured on held-out halves) and stored as a new inventory version only
when there are enough labels and it does not make held-out calibration worse
(otherwise it says why and stores nothing; the exit status is 0 either way);
`--dry-run` only shows it. POST /v1/inventories/{name}/calibrate is the same.
"""


from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from service.cli.teams import add_team_option, team_id

if TYPE_CHECKING:
    from service.config import Settings
    from service.engine.calibration import CalibrationProposal


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser(
        "calibrate", help="fit an inventory's confidence temperature on its labeled items"
    )
    parser.add_argument("name", help="a stored inventory")
    parser.add_argument("--dry-run", action="store_true", help="show the fit without storing")
    add_team_option(parser)
    parser.set_defaults(func=run)


def describe(proposal: CalibrationProposal) -> list[str]:
    """Before/after figures of a proposal, one line each (CLI and logs)."""
    lines = [f"{proposal.labels} labeled items (examples and evidence, cross-fitted)"]
    if proposal.temperature is None:
        return lines
    lines.append(f"accuracy {proposal.accuracy:.3f}")
    lines.append(f"temperature {proposal.current_temperature:.4f} -> {proposal.temperature:.4f}")
    lines.append(
        f"held-out expected calibration error {proposal.ece_before:.4f} -> "
        f"{proposal.ece_after:.4f}"
    )
    return lines


def run(args: argparse.Namespace, settings: Settings) -> int:
    print(f"reading the labeled items of '{args.name}' ...", flush=True)
    from service.engine import DEFAULT_TEMPERATURE, propose_calibration
    from service.store import inventories
    from service.store.database import session_scope
    from service.store.evidence import load_evidence
    from service.tagging.engines import build_disambiguator

    with session_scope(settings) as session:
        team = team_id(session, args.team)
        spec = inventories.load_inventory_spec(session, team, args.name)
        inventory_id = inventories.get_inventory(session, team, args.name).id
        evidence = load_evidence(session, inventory_id)
    print(f"loading the model, encoding the senses and {len(evidence)} evidence items ...",
          flush=True)
    book = build_disambiguator(settings, spec, evidence).prototypes
    proposal = propose_calibration(book, spec.settings.temperature or DEFAULT_TEMPERATURE)
    for line in describe(proposal):
        print(line)
    if not proposal.accepted:
        # a refusal is an answer, not a failure: the current temperature stays in use
        print(f"not stored: {proposal.refused}")
        return 0
    if args.dry_run:
        print("dry run: nothing stored")
        return 0
    with session_scope(settings) as session:
        inventory = inventories.edit_inventory(
            session,
            team,
            args.name,
            lambda document: document["settings"].update(temperature=proposal.temperature),
        )
        print(f"stored in inventory '{args.name}' version {inventory.version}")
    return 0
