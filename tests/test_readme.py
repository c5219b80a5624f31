"""The README's configuration table and command list stay true to the code."""

from __future__ import annotations

import re
from pathlib import Path

from service.cli.main import build_parser
from service.config import Settings

README = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def test_every_setting_is_in_the_configuration_table_with_its_default():
    rows = dict(re.findall(r"^\| `(WHICHSENSE_[A-Z_]+)` \| ([^|]+) \|", README, re.MULTILINE))
    fields = {f"WHICHSENSE_{name.upper()}": field for name, field in Settings.model_fields.items()}
    assert set(rows) == set(fields)
    for variable, field in fields.items():
        shown = rows[variable].strip().strip("`")
        if isinstance(field.default, bool):
            assert shown == str(field.default).lower(), variable
        elif isinstance(field.default, (int, float)):
            assert float(shown) == float(field.default), variable


def test_every_subcommand_is_in_the_command_table():
    parser = build_parser()
    commands = next(a for a in parser._actions if a.dest == "command").choices
    for name in commands:
        assert f"`whichsense {name}" in README, name
