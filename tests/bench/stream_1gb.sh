#!/bin/sh
# SPDX-License-Identifier: MIT
# Streams a ~1 GB sweeps file through `splitlot ingest --sweeps -` and reports
# peak RSS (GNU time -v) next to a small run, to show memory stays flat with
# file size. A figure, not a test: too slow for CI. Usage:
#   tests/bench/stream_1gb.sh [SPLITLOT_BINARY]     (SIZE_MB=1024 SMALL_MB=64)
set -eu
here=$(cd "$(dirname "$0")/../.." && pwd)
bin=$(cd "$(dirname "${1:-$here/build/splitlot}")" && pwd)/$(basename "${1:-splitlot}")
size_mb=${SIZE_MB:-1024}
small_mb=${SMALL_MB:-64}
[ -x /usr/bin/time ] || { echo "stream_1gb: needs GNU time (apt-get install -y time)" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT INT TERM
cd "$work"

# One simulated lot, repeated with renamed devices (a suffix per copy) until
# the stream reaches the wanted size; the header is written once.
"$bin" simulate "$here/plans/demo.yaml" --out sim --devices-per-wafer 400 --temperature-K 300 >/dev/null
piece=$(wc -c <sim/sweeps.csv)
stream() {
    copies=$(( ($1 * 1048576 + piece - 1) / piece ))
    head -n 1 sim/sweeps.csv
    i=1
    while [ "$i" -le "$copies" ]; do
        awk -F, -v OFS=, -v c="$i" 'NR > 1 { $2 = $2 "-c" c; print }' sim/sweeps.csv
        i=$((i + 1))
    done
}

# Import a stream of mb MiB into a fresh database; print the figures.
run() {
    rm -f t.db t.db-wal t.db-shm
    "$bin" predict "$here/plans/demo.yaml" --db t.db >/dev/null 2>&1
    stream "$1" | /usr/bin/time -v -o time.txt \
        "$bin" ingest --lot DEMO-01 --sweeps - --db t.db --format csv >summary.txt
    rows=$(sed -n 's/^# rows: //p' summary.txt)
    devices=$(sed -n 's/^# devices: //p' summary.txt)
    rss=$(grep 'Maximum resident set size' time.txt | awk '{print $NF}')
    wall=$(grep 'Elapsed (wall clock)' time.txt | awk '{print $NF}')
    echo "stream of ${1} MiB: $rows rows, $devices devices, peak RSS $((rss / 1024)) MiB, wall $wall, database $(( $(wc -c <t.db) / 1048576 )) MiB"
}

run "$small_mb"
run "$size_mb"
