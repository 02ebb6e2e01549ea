#!/bin/sh
# SPDX-License-Identifier: MIT
# The instrument fixtures in the repository are exactly what the generator
# writes now: regenerate into a scratch folder and compare file by file.
# Usage: check_fixtures.sh GEN_INSTRUMENT DATA_DIR
set -eu
gen=$1
data=$2
out=$(mktemp -d)
trap 'rm -rf "$out"' EXIT
"$gen" "$data" "$out"
status=0
for f in "$out"/*.csv; do
    name=$(basename "$f")
    if ! cmp -s "$f" "$data/$name"; then
        echo "tests/data/instrument/$name differs from what gen_instrument writes" >&2
        status=1
    fi
done
exit $status
