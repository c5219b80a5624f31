"""The command line: migrations, keys, inventory import/export/list."""

from __future__ import annotations

import json


def test_inventory_import_export_list(cli, settings, inventory_document, tmp_path, capsys):
    source = tmp_path / "inv.json"
    source.write_text(json.dumps(inventory_document), encoding="utf-8")
    assert cli(["inventory", "import", str(source)]) == 0
    assert cli(["inventory", "import", str(source)]) == 0  # a re-import is a new version
    exported = tmp_path / "out.json"
    assert cli(["inventory", "export", "tiny-shop", "-o", str(exported)]) == 0
    document = json.loads(exported.read_text(encoding="utf-8"))
    assert document["version"] == 2
    assert cli(["inventory", "import", str(exported)]) == 0
    again = tmp_path / "again.json"
    cli(["inventory", "export", "tiny-shop", "-o", str(again)])
    first, second = document, json.loads(again.read_text(encoding="utf-8"))
    first.pop("version"), second.pop("version")
    assert first == second
    csv_out = tmp_path / "out.csv"
    assert cli(["inventory", "export", "tiny-shop", "-o", str(csv_out)]) == 0
    assert cli(["inventory", "import", str(csv_out), "--name", "from-csv"]) == 0
    capsys.readouterr()
    assert cli(["inventory", "list"]) == 0
    listing = capsys.readouterr().out
    assert "tiny-shop\tversion 3\t2 terms\t4 senses" in listing
    assert "from-csv\tversion 1" in listing


def test_invalid_inventory_file_reports_pointer_and_fails(
    cli, settings, inventory_document, tmp_path, capsys
):
    inventory_document["terms"][0]["senses"][1]["id"] = "bass.fish"
    source = tmp_path / "bad.json"
    source.write_text(json.dumps(inventory_document), encoding="utf-8")
    assert cli(["inventory", "import", str(source)]) == 2
    err = capsys.readouterr().err
    assert "/terms/0/senses/1/id" in err
    assert cli(["inventory", "export", "tiny-shop"]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_keys_create_list_revoke(cli, settings, capsys):
    assert cli(["keys", "create", "--scope", "review", "--label", "night shift"]) == 0
    out = capsys.readouterr().out
    key_id = out.split("key id:")[1].split()[0]
    assert cli(["keys", "list"]) == 0
    assert f"{key_id}\treview\tactive\tnight shift" in capsys.readouterr().out
    assert cli(["keys", "revoke", key_id]) == 0
    cli(["keys", "list"])
    assert "revoked" in capsys.readouterr().out
    assert cli(["keys", "revoke", "nosuchkey"]) == 2


def test_db_current_reports_head(cli, settings, capsys):
    assert cli(["db", "current"]) == 0
    from service.store.database import head_revision

    assert f"revision {head_revision()}" in capsys.readouterr().out
