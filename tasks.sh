#!/usr/bin/env bash
# Set up an isolated environment (.venv) on first use, then run a task.
#   bash tasks.sh demo   run the demo end to end on the built-in scenario
#   bash tasks.sh test   run the whole test suite
#   bash tasks.sh lint   run ruff
set -euo pipefail
cd "$(dirname "$0")"

setup() {
  local python
  python=$(command -v python3 || command -v python)
  if [ ! -x .venv/bin/python ]; then
    "$python" -m venv .venv
  fi
  local stamp
  stamp=".venv/.installed-$(cksum pyproject.toml | cut -d' ' -f1)"
  if [ ! -f "$stamp" ]; then
    echo "Installing marketsim and its dependencies into .venv (first run only) ..."
    .venv/bin/python -m pip install --quiet --upgrade pip
    .venv/bin/python -m pip install --quiet -e ".[test]"
    touch "$stamp"
  fi
}

task=${1:-}
[ $# -gt 0 ] && shift
case "$task" in
  demo) setup; .venv/bin/python -m marketsim demo "$@" ;;
  test) setup; .venv/bin/python -m pytest "$@" ;;
  lint) setup; .venv/bin/ruff check . ;;
  *) echo "usage: bash tasks.sh demo|test|lint [arguments]" >&2; exit 2 ;;
esac
