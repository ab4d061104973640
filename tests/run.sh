#!/bin/sh
# Run the test suite: sets up .venv with the test extra, then pytest; exits with pytest's code.
set -u
cd "$(dirname "$0")/.." || exit 1
. tests/setup_env.sh
axl_setup "test,excel" || exit 1
"$AXL_PY" -m pytest "$@"
