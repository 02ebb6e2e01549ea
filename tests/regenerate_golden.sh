#!/bin/sh
# SPDX-License-Identifier: MIT
# Writes the golden outputs under tests/data/analyze again from the current
# build: `compare` of each fixture lot (plan and results in the same folder)
# in each format that test_analyze's test_compare_output_unchanged checks
# (keep the two lists the same). Only for an intended change of the output,
# reviewed line by line in the diff (DEVELOPERS.md, "Golden outputs").
# Usage: tests/regenerate_golden.sh [SPLITLOT]   (default build/splitlot)
set -eu
cd "$(dirname "$0")/.."
prog=$(cd "$(dirname "${1:-build/splitlot}")" && pwd)/$(basename "${1:-build/splitlot}")
data=$(pwd)/tests/data/analyze
[ -x "$prog" ] || { echo "error: $prog not built (make build)" >&2; exit 1; }
work=$(mktemp -d "${TMPDIR:-/tmp}/splitlot-golden-XXXXXX")
trap 'rm -rf "$work"' EXIT INT TERM

# lot plan results output-prefix formats...
golden() {
    lot=$1 plan=$2 results=$3 prefix=$4
    shift 4
    rm -f "$work/t.db"
    (cd "$work" &&
        "$prog" predict "$data/$plan" --db t.db >/dev/null 2>&1 &&
        "$prog" ingest --lot "$lot" --results "$data/$results" --db t.db >/dev/null 2>&1) ||
        { echo "error: could not store $lot" >&2; exit 1; }
    for format in "$@"; do
        case $format in table) ext=txt ;; *) ext=$format ;; esac
        (cd "$work" && "$prog" compare --lot "$lot" --db t.db --format "$format") \
            >"$data/$prefix-compare.$ext"
        echo "wrote tests/data/analyze/$prefix-compare.$ext"
    done
}

golden STATS-01 stats-lot.yaml stats-results.csv stats json csv table
golden NOSIGMA-01 no-sigma.yaml no-sigma-results.csv no-sigma json table
git status --short tests/data/analyze
