"""Signing secrets are shown at key creation in every output mode and can be rotated."""

from __future__ import annotations

import json

from service.store.database import session_scope
from service.store.models import ApiKey


def _stored_secret(settings, key_id: str) -> str:
    with session_scope(settings) as session:
        return session.query(ApiKey).filter_by(key_id=key_id).one().signing_secret


def test_quiet_prints_key_and_signing_secret_on_one_line(cli, settings, capsys):
    assert cli(["keys", "create", "--scope", "ingest", "--quiet"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) == 1
    key, secret = lines[0].split(" ")
    assert key.startswith("ws_")
    assert secret == _stored_secret(settings, key.split("_")[1])


def test_json_output_carries_the_signing_secret(cli, settings, capsys):
    assert cli(["keys", "create", "--scope", "admin", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(data) == {"key_id", "team", "scope", "key", "signing_secret"}
    assert data["scope"] == "admin" and data["key"].startswith(f"ws_{data['key_id']}_")
    assert data["signing_secret"] == _stored_secret(settings, data["key_id"])


def test_rotate_secret_replaces_it_and_refuses_unknown_keys(cli, settings, capsys):
    assert cli(["keys", "create", "--scope", "ingest", "--json"]) == 0
    first = json.loads(capsys.readouterr().out)
    assert cli(["keys", "rotate-secret", first["key_id"]]) == 0
    rotated = capsys.readouterr().out.strip()
    assert rotated != first["signing_secret"] and len(rotated) == 64
    assert _stored_secret(settings, first["key_id"]) == rotated
    assert cli(["keys", "rotate-secret", "nosuchkey"]) == 2
    assert cli(["keys", "revoke", first["key_id"]]) == 0
    assert cli(["keys", "rotate-secret", first["key_id"]]) == 2
