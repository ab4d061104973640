#!/bin/sh
# Run the demo: sets up .venv, writes demo/out/record.json and record.pdf, prints the PDF path.
set -u
cd "$(dirname "$0")/.." || exit 1
. tests/setup_env.sh
axl_setup "" || exit 1
"$AXL_VENV/bin/axisledger" demo --out demo/out || exit $?
echo "PDF: $(pwd)/demo/out/record.pdf"
