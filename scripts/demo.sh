#!/usr/bin/env bash
# Set up, then run the main job on the embedded default: a fresh SQLite database, the demo
# inventory and corpus submitted as a batch through the HTTP API to the in-process worker.
# Installs only what the main job needs (scripts/test.sh adds the test extras).
# Leaves the API serving on http://$WHICHSENSE_HOST:$WHICHSENSE_PORT (127.0.0.1:8000; Ctrl-C stops it).
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/install.sh
export HF_HUB_OFFLINE=1 TRANSFORMERS_OFFLINE=1
export WHICHSENSE_DATABASE_URL=${WHICHSENSE_DATABASE_URL:-sqlite:///./demo-output/whichsense.db}
exec .venv/bin/whichsense demo --fresh "$@"
