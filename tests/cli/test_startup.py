"""`whichsense --help` and every subcommand's help are answered without importing the heavy
stack (torch, transformers, FastAPI, SQLAlchemy, NumPy): start-up stays fast because handlers
import what they need. Checked in a fresh interpreter, where nothing is imported yet."""

from __future__ import annotations

import json
import subprocess
import sys

from service.cli.main import build_parser

HEAVY = ("torch", "transformers", "fastapi", "sqlalchemy", "numpy", "nltk", "uvicorn", "httpx")

PROBE = """
import contextlib, io, json, sys
from service.cli.main import build_parser
parser = build_parser()
commands = next(a for a in parser._actions if a.dest == "command").choices
helped = []
for words in [["--help"], *([name, "--help"] for name in commands)]:
    with contextlib.redirect_stdout(io.StringIO()) as out:
        try:
            build_parser().parse_args(words)
        except SystemExit as exit:
            helped.append((words[0], exit.code, "usage:" in out.getvalue()))
print(json.dumps({"helped": helped, "loaded": [m for m in %r if m in sys.modules]}))
"""


def test_help_of_every_command_loads_none_of_the_heavy_stack() -> None:
    probe = subprocess.run(
        [sys.executable, "-c", PROBE % (HEAVY,)], capture_output=True, text=True, check=True
    )
    report = json.loads(probe.stdout.strip().splitlines()[-1])
    commands = next(a for a in build_parser()._actions if a.dest == "command").choices
    assert len(report["helped"]) == len(commands) + 1
    assert all(code == 0 and usage for _, code, usage in report["helped"]), report["helped"]
    assert report["loaded"] == []
