"""Teams: the unit of ownership. Only the operator (the CLI) creates teams and keys.

Every other store function takes the caller's team id and filters by it, so a
row of another team is "not found", exactly like a row that does not exist.
"""

from __future__ import annotations

import re

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.store.errors import Conflict, NotFound
from service.store.models import Team

NAME = re.compile(r"^[a-z0-9][a-z0-9._-]{0,63}$")
DEFAULT_TEAM = "default"
MAX_RETENTION_DAYS = 3650


def _check_retention(days: int | None) -> int | None:
    if days is not None and not 1 <= days <= MAX_RETENTION_DAYS:
        raise ValueError(f"retention must be 1 to {MAX_RETENTION_DAYS} days (or none)")
    return days


def create_team(session: Session, name: str, retention_days: int | None = None) -> Team:
    """A new team; Conflict if the name is taken."""
    if not NAME.match(name):
        raise ValueError(
            "a team name is 1 to 64 lower-case letters, digits, '.', '_' or '-', "
            "starting with a letter or digit"
        )
    team = Team(name=name, retention_days=_check_retention(retention_days))
    try:
        with session.begin_nested():
            session.add(team)
    except IntegrityError:
        raise Conflict(f"team '{name}' already exists") from None
    return team


def list_teams(session: Session) -> list[Team]:
    return list(session.scalars(select(Team).order_by(Team.name)))


def get_team(session: Session, team_id: int) -> Team:
    team = session.get(Team, team_id)
    if team is None:
        raise NotFound(f"team {team_id} does not exist")
    return team


def find_team(session: Session, name: str) -> Team:
    team = session.scalars(select(Team).where(Team.name == name)).one_or_none()
    if team is None:
        raise NotFound(f"team '{name}' does not exist; `whichsense teams list` shows the teams")
    return team


def choose_team(session: Session, name: str | None) -> tuple[Team, str | None]:
    """The team an operator command acts on, and a note when it was not named.

    A named team must exist. Unnamed: the only team; with no team at all, a new
    team `default` (so a fresh install needs no extra step); with several, an error.
    """
    if name is not None:
        return find_team(session, name), None
    teams = list_teams(session)
    if len(teams) == 1:
        return teams[0], f"using team '{teams[0].name}', the only team"
    if not teams:
        return create_team(session, DEFAULT_TEAM), f"created team '{DEFAULT_TEAM}'"
    names = ", ".join(t.name for t in teams)
    raise ValueError(f"there are several teams ({names}); name one with --team")


def set_retention(session: Session, team_id: int, days: int | None) -> Team:
    team = get_team(session, team_id)
    team.retention_days = _check_retention(days)
    session.flush()
    return team


def ensure_team(session: Session, name: str) -> Team:
    """The team `name`, made if missing (the demo reuses its teams across runs)."""
    found = session.scalars(select(Team).where(Team.name == name)).one_or_none()
    return found if found is not None else create_team(session, name)
