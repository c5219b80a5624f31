"""scripts/install.sh: the main job's install has no test extras; one line per step."""

from __future__ import annotations

import os
import shutil
import stat
import subprocess
import tomllib
from pathlib import Path

import pytest

from tests.conftest import REPO

FAKE_PYTHON = """#!/bin/sh
echo "$@" >> "$(dirname "$0")/../../calls.log"
"""
FAKE_WHICHSENSE = "#!/bin/sh\necho 'whichsense 0.1.0'\n"


def _executable(path: Path, text: str) -> None:
    path.write_text(text)
    path.chmod(path.stat().st_mode | stat.S_IXUSR)


def _run_install(tmp_path: Path, *args: str) -> tuple[list[str], list[str]]:
    """Run a copy of the script against a stand-in venv that only records pip's arguments."""
    (tmp_path / "scripts").mkdir()
    shutil.copy(REPO / "scripts" / "install.sh", tmp_path / "scripts" / "install.sh")
    (tmp_path / ".venv" / "bin").mkdir(parents=True)
    _executable(tmp_path / ".venv" / "bin" / "python", FAKE_PYTHON)
    _executable(tmp_path / ".venv" / "bin" / "whichsense", FAKE_WHICHSENSE)
    env = {k: v for k, v in os.environ.items() if k != "TORCH_INDEX_URL"}
    done = subprocess.run(
        ["bash", str(tmp_path / "scripts" / "install.sh"), *args],
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )
    calls = (tmp_path / "calls.log").read_text().splitlines()
    return calls, done.stdout.splitlines() + done.stderr.splitlines()


@pytest.mark.skipif(not Path("/usr/share/wordnet/index.sense").exists(), reason="needs WordNet")
def test_the_main_job_installs_no_test_extras_and_reports_each_step(tmp_path):
    calls, printed = _run_install(tmp_path)
    assert calls[-1] == "-m pip install -q -e ."
    assert any("torch==2.13.0" in call for call in calls)
    assert [line[:5] for line in printed[:4]] == ["[1/4 ", "[2/4 ", "[3/4 ", "[4/4 "]
    assert len(printed) == 5 and "whichsense 0.1.0" in printed[-1]


@pytest.mark.skipif(not Path("/usr/bin/chromium").exists(), reason="needs Chromium")
def test_the_test_install_adds_the_test_extras(tmp_path):
    calls, _ = _run_install(tmp_path, "--test")
    assert calls[-1] == "-m pip install -q -e .[test]"


def test_unknown_install_option_is_refused(tmp_path):
    with pytest.raises(subprocess.CalledProcessError) as refused:
        _run_install(tmp_path, "--everything")
    assert refused.value.returncode == 2


def test_license_is_an_spdx_expression_not_a_deprecated_table():
    # PEP 639: `project.license` is an SPDX expression string; setuptools warns on the table.
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    assert project["license"] == "Apache-2.0"
    test_only = {"pytest", "hypothesis", "ruff", "playwright", "mypy", "schemathesis"}
    names = {dep.split(">")[0].split("=")[0].split("[")[0] for dep in project["dependencies"]}
    assert not names & test_only
