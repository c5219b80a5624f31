"""The command line: migrations, keys, inventory import/export/list."""

from __future__ import annotations

import json

from service.cli.main import main


def test_inventory_import_export_list(settings, inventory_document, tmp_path, capsys):
    source = tmp_path / "inv.json"
    source.write_text(json.dumps(inventory_document), encoding="utf-8")
    assert main(["inventory", "import", str(source)]) == 0
    assert main(["inventory", "import", str(source)]) == 0  # a re-import is a new version
    exported = tmp_path / "out.json"
    assert main(["inventory", "export", "tiny-shop", "-o", str(exported)]) == 0
    document = json.loads(exported.read_text(encoding="utf-8"))
    assert document["version"] == 2
    assert main(["inventory", "import", str(exported)]) == 0
    again = tmp_path / "again.json"
    main(["inventory", "export", "tiny-shop", "-o", str(again)])
    first, second = document, json.loads(again.read_text(encoding="utf-8"))
    first.pop("version"), second.pop("version")
    assert first == second
    csv_out = tmp_path / "out.csv"
    assert main(["inventory", "export", "tiny-shop", "-o", str(csv_out)]) == 0
    assert main(["inventory", "import", str(csv_out), "--name", "from-csv"]) == 0
    capsys.readouterr()
    assert main(["inventory", "list"]) == 0
    listing = capsys.readouterr().out
    assert "tiny-shop\tversion 3\t2 terms\t4 senses" in listing
    assert "from-csv\tversion 1" in listing


def test_invalid_inventory_file_reports_pointer_and_fails(
    settings, inventory_document, tmp_path, capsys
):
    inventory_document["terms"][0]["senses"][1]["id"] = "bass.fish"
    source = tmp_path / "bad.json"
    source.write_text(json.dumps(inventory_document), encoding="utf-8")
    assert main(["inventory", "import", str(source)]) == 2
    err = capsys.readouterr().err
    assert "/terms/0/senses/1/id" in err
    assert main(["inventory", "export", "tiny-shop"]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_keys_create_list_revoke(settings, capsys):
    assert main(["keys", "create", "--scope", "review", "--label", "night shift"]) == 0
    captured = capsys.readouterr()
    assert "created team 'default'" in captured.err  # an empty database gets one team
    key_id = captured.out.split("key id:")[1].split()[0]
    assert main(["keys", "list"]) == 0
    assert f"{key_id}\tdefault\treview\tactive\tnight shift" in capsys.readouterr().out
    assert main(["keys", "revoke", key_id]) == 0
    main(["keys", "list"])
    assert "revoked" in capsys.readouterr().out
    assert main(["keys", "revoke", "nosuchkey"]) == 2


def test_db_current_reports_head(settings, capsys):
    assert main(["db", "current"]) == 0
    from service.store.database import head_revision

    assert f"revision {head_revision()}" in capsys.readouterr().out


def test_teams_and_keys_per_team(settings, capsys):
    assert main(["teams", "create", "search-eu"]) == 0
    assert main(["keys", "create", "--scope", "admin"]) == 0  # the only team: chosen, and said
    assert "using team 'search-eu', the only team" in capsys.readouterr().err
    assert main(["teams", "create", "search-us", "--retention-days", "30"]) == 0
    assert main(["teams", "create", "search-us"]) == 2  # taken
    assert main(["teams", "create", "Bad Name"]) == 2
    capsys.readouterr()
    assert main(["keys", "create", "--scope", "ingest"]) == 2  # two teams: name one
    assert "several teams (search-eu, search-us)" in capsys.readouterr().err
    assert main(["keys", "create", "--scope", "ingest", "--team", "search-us", "--quiet"]) == 0
    token = capsys.readouterr().out.strip()
    assert main(["keys", "create", "--scope", "ingest", "--team", "nosuch"]) == 2
    capsys.readouterr()
    assert main(["keys", "list", "--team", "search-us"]) == 0
    listed = capsys.readouterr().out.splitlines()
    assert len(listed) == 1 and listed[0].startswith(token.split("_")[1] + "\tsearch-us\tingest")
    assert main(["teams", "list"]) == 0
    out = capsys.readouterr().out
    assert "search-eu\t1 keys\t0 inventories\t0 batches\tretention: kept" in out
    assert "search-us\t1 keys\t0 inventories\t0 batches\tretention: 30 days" in out
    assert main(["teams", "retention", "search-us", "none"]) == 0
    assert "retention: none" in capsys.readouterr().out
