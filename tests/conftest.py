"""Shared fixtures: databases (SQLite and the real PostgreSQL), app clients, API keys."""

from __future__ import annotations

import copy
import functools
import os
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

os.environ.setdefault("HF_HUB_OFFLINE", "1")
os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")

from service.config import Settings
from service.store import database
from service.store.models import Base

REPO = Path(__file__).resolve().parent.parent
SHARED_DATA = Path(os.environ.get("WHICHSENSE_TEST_SHARED_DATA", REPO.parent / "shared" / "data"))
WORDNET_DIR = Path("/usr/share/wordnet")
POSTGRES_URL = os.environ.get(
    "WHICHSENSE_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
)

SMALL_INVENTORY: dict[str, Any] = {
    "format": "whichsense.inventory/1",
    "name": "tiny-shop",
    "description": "Two terms for the tests.",
    "terms": [
        {
            "term": "bass",
            "aliases": ["bass guitar"],
            "senses": [
                {
                    "id": "bass.fish",
                    "gloss": "a freshwater or sea fish caught for sport or food",
                    "examples": ["He landed a four-pound bass from the dock at dawn."],
                    "tags": ["dept:fishing"],
                },
                {
                    "id": "bass.music",
                    "gloss": "the lowest range of musical sound, or the instrument that plays it",
                    "examples": ["Turn the bass down on that speaker, the windows rattle."],
                    "tags": ["dept:music"],
                },
            ],
        },
        {
            "term": "mouse",
            "pos": "n",
            "senses": [
                {
                    "id": "mouse.animal",
                    "gloss": "a small rodent with a long tail",
                    "examples": ["A mouse got into the pantry and chewed the oats."],
                },
                {
                    "id": "mouse.device",
                    "gloss": "a hand-held pointing device for a computer",
                    "examples": ["The wireless mouse needs two new batteries."],
                },
            ],
        },
    ],
}


@pytest.fixture
def inventory_document() -> dict[str, Any]:
    """A fresh copy of the small test inventory."""
    return copy.deepcopy(SMALL_INVENTORY)


def missing_outside_ci(what: str) -> None:
    """Skip a test whose external data is missing; in CI (where it must exist) fail instead."""
    if os.environ.get("CI"):
        pytest.fail(f"{what} (CI must provide it)")
    pytest.skip(what)


def shared_data(*names: str) -> list[Path]:
    """Files of the external corpora in ../shared/data (or $WHICHSENSE_TEST_SHARED_DATA)."""
    paths = [SHARED_DATA / name for name in names]
    for path in paths:
        if not path.is_file():
            missing_outside_ci(f"external corpus missing: {path} (see ../shared/README.md)")
    return paths


@pytest.fixture(scope="session")
def wordnet() -> Any:
    """The system's WordNet 3.0 database, opened once per session."""
    if not (WORDNET_DIR / "index.sense").is_file():
        missing_outside_ci(
            "WordNet 3.0 database not installed (apt-get install wordnet-base wordnet-sense-index)"
        )
    from service.engine.lexicon import open_wordnet

    return open_wordnet(WORDNET_DIR)


def _postgres_available() -> bool:
    try:
        engine = create_engine(POSTGRES_URL)
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        engine.dispose()
        return True
    except Exception:
        return False


@pytest.fixture(scope="session")
def postgres_admin_url() -> str:
    """The server URL; CI must have PostgreSQL, so there a missing server is a failure."""
    if not _postgres_available():
        if os.environ.get("CI"):
            pytest.fail(f"PostgreSQL is not reachable at {POSTGRES_URL}")
        pytest.skip(f"PostgreSQL is not reachable at {POSTGRES_URL}")
    return POSTGRES_URL


def create_postgres_database(admin_url: str) -> str:
    """A new, empty database on the test server; returns its URL."""
    name = f"whichsense_test_{uuid.uuid4().hex[:10]}"
    engine = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with engine.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    engine.dispose()
    return make_url(admin_url).set(database=name).render_as_string(hide_password=False)


def drop_postgres_database(admin_url: str, url: str) -> None:
    database.engine_for(url).dispose()
    database.engine_for.cache_clear()
    name = make_url(url).database
    engine = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with engine.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    engine.dispose()


@pytest.fixture(scope="session")
def postgres_url(postgres_admin_url: str) -> Iterator[str]:
    """One migrated PostgreSQL database for the session; tables are emptied per test."""
    url = create_postgres_database(postgres_admin_url)
    database.upgrade(url)
    yield url
    drop_postgres_database(postgres_admin_url, url)


def _empty_tables(url: str) -> None:
    engine = database.engine_for(url)
    with engine.begin() as conn:
        names = ", ".join(f'"{t.name}"' for t in Base.metadata.sorted_tables)
        conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))
    # Ids restart, so engines cached from the previous test's rows must not be reused.
    from service.tagging.engines import shared_engines

    shared_engines().forget_database(url)


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A migrated, empty database: a SQLite file, then the real PostgreSQL server."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'whichsense.db'}"
        database.upgrade(url)
        return url
    url = request.getfixturevalue("postgres_url")
    _empty_tables(url)
    return url


@pytest.fixture
def settings(database_url: str, tmp_path: Path) -> Settings:
    """Settings for the test database; code under test gets them passed, as in production."""
    return Settings(
        database_url=database_url, cache_dir=tmp_path / "cache", max_request_bytes=200_000
    )



@pytest.fixture
def cli(settings: Settings) -> Any:
    """`whichsense ARGS...` run in-process with the test's settings: cli([...]) -> status."""
    from service.cli.main import main

    return functools.partial(main, settings=settings)


TEAM = "alpha"


@pytest.fixture
def team_id(settings: Settings) -> int:
    """The test team's id: every key, inventory and batch of a test belongs to it."""
    from service.store.teams import create_team

    with database.session_scope(settings) as session:
        return create_team(session, TEAM).id


def team_keys(settings: Settings, team: int) -> dict[str, str]:
    """One live token per scope in `team`."""
    from service.store.keys import create_key

    with database.session_scope(settings) as session:
        return {
            scope: create_key(session, team, scope).token for scope in ("ingest", "review", "admin")
        }


@pytest.fixture
def api_keys(settings: Settings, team_id: int) -> dict[str, str]:
    """One live token per scope, all of the test team."""
    return team_keys(settings, team_id)


@pytest.fixture
def client(settings: Settings) -> Iterator[Any]:
    """A TestClient on a fresh app over the test database (lifespan run: migration checked)."""
    from fastapi.testclient import TestClient

    from service.api.app import create_app

    with TestClient(create_app(settings), raise_server_exceptions=False) as test_client:
        yield test_client


@pytest.fixture(scope="session")
def encoder() -> Any:
    """The test session's one encoder, the same object every engine the service builds uses
    (a fixture of the same name in a subfolder's conftest would load a second one)."""
    from service.tagging.engines import load_encoder

    return load_encoder(Settings())


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}
