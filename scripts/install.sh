#!/usr/bin/env bash
# Set up a fresh machine: system packages (WordNet, Chromium), a virtual environment with the
# CPU build of torch pinned, the bundled encoder and whichsense itself. Safe to run again.
set -euo pipefail
cd "$(dirname "$0")/.."

need_apt=()
[ -f /usr/share/wordnet/index.sense ] || need_apt+=(wordnet-base wordnet-sense-index)
[ -x /usr/bin/chromium ] || need_apt+=(chromium)
if [ ${#need_apt[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then
    echo "installing system packages: ${need_apt[*]}"
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need_apt[@]}" >/dev/null
  else
    echo "warning: missing system packages (${need_apt[*]}); run as root or install them" >&2
  fi
fi

PYTHON=${PYTHON:-python3}
[ -x .venv/bin/python ] || "$PYTHON" -m venv .venv
.venv/bin/python -m pip install -q --upgrade pip
# The CPU build: an unpinned torch would pull a multi-gigabyte CUDA build. Where the CPU wheel
# is not already offered by the host's package index, set TORCH_INDEX_URL to PyTorch's CPU index.
.venv/bin/python -m pip install -q "torch==2.13.0" ${TORCH_INDEX_URL:+--index-url "$TORCH_INDEX_URL"}
.venv/bin/python -m pip install -q -e ".[test]"
echo "whichsense installed in .venv ($(.venv/bin/whichsense --version))"
