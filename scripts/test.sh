#!/usr/bin/env bash
# Install what is needed, make sure PostgreSQL is up, then run the whole test suite.
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/install.sh --test

if ! pg_isready -q -h 127.0.0.1 -p 5432 2>/dev/null; then
  echo "starting PostgreSQL"
  pg_ctlcluster --skip-systemctl-redirect "$(ls /etc/postgresql)" main start || true
  for _ in $(seq 1 30); do pg_isready -q -h 127.0.0.1 -p 5432 && break; sleep 1; done
fi

export HF_HUB_OFFLINE=1 TRANSFORMERS_OFFLINE=1
.venv/bin/ruff check .
.venv/bin/mypy  # strict on service/engine; see [tool.mypy] in pyproject.toml
.venv/bin/python -m pytest -q "$@"
