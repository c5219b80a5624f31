"""`serve` listens where WHICHSENSE_HOST and WHICHSENSE_PORT say, unless flags say otherwise."""

from __future__ import annotations

from typing import Any

import pytest
from pydantic import ValidationError

from service.cli.main import build_parser
from service.config import Settings, load_settings


@pytest.fixture
def listened(monkeypatch: pytest.MonkeyPatch, tmp_path) -> dict[str, Any]:
    seen: dict[str, Any] = {}
    monkeypatch.setenv("WHICHSENSE_DATABASE_URL", f"sqlite:///{tmp_path / 'x.db'}")
    import uvicorn

    from service.store import database

    monkeypatch.setattr(database, "require_migrated", lambda url: None)
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: seen.update(kw))
    yield seen


def _serve(*flags: str) -> None:
    args = build_parser().parse_args(["serve", "--no-worker", *flags])
    assert args.func(args, load_settings()) == 0


def test_environment_chooses_host_and_port(listened, monkeypatch):
    monkeypatch.setenv("WHICHSENSE_HOST", "0.0.0.0")
    monkeypatch.setenv("WHICHSENSE_PORT", "8123")
    _serve()
    assert (listened["host"], listened["port"]) == ("0.0.0.0", 8123)
    _serve("--port", "9001", "--host", "127.0.0.1")
    assert (listened["host"], listened["port"]) == ("127.0.0.1", 9001)


def test_defaults_and_bounds(monkeypatch):
    monkeypatch.delenv("WHICHSENSE_HOST", raising=False)
    monkeypatch.delenv("WHICHSENSE_PORT", raising=False)
    assert (Settings().host, Settings().port) == ("127.0.0.1", 8000)
    for bad in ("0", "65536", "http"):
        with pytest.raises(ValidationError):
            Settings(port=bad)
