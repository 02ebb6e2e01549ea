#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): `splitlot ingest --sweeps` of a simulated lot of
# 12,500 devices x 201 points (2.5 million rows, tests/bench/plan-12500.yaml
# with every device probed); prints wall seconds, rows per second and peak RSS
# of the import, best of RUNS runs into a fresh copy of the database.
# Usage: tests/bench/bench_ingest.sh [BUILD_DIR] [RUNS]   (from the repo root)
set -eu
build=${1:-build-release}
runs=${2:-3}
bin=$(cd "$build" && pwd)/splitlot
here=$(cd "$(dirname "$0")" && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work"

# every device probed, so the file holds 50 x 250 sweeps
sed 's/^expected_yield: .*/expected_yield: 1.0/' "$here/plan-12500.yaml" > plan.yaml
"$bin" predict plan.yaml --db pristine.db --format csv > /dev/null 2>&1
"$bin" simulate plan.yaml --out sim --seed 12500 > /dev/null
rows=$(($(wc -l < sim/sweeps.csv) - 1))
bytes=$(wc -c < sim/sweeps.csv)
echo "sweeps.csv: $rows rows, $bytes bytes"

have_time=0
if /usr/bin/time -v true > /dev/null 2>&1; then
    have_time=1
fi

best=""
best_rss=""
i=0
while [ "$i" -lt "$runs" ]; do
    i=$((i + 1))
    cp pristine.db t.db
    rm -f t.db-wal t.db-shm
    if [ "$have_time" = 1 ]; then
        /usr/bin/time -v -o time.txt "$bin" ingest --lot BENCH-12500 --sweeps sim/sweeps.csv \
            --db t.db --format csv > out.txt 2> err.txt
        wall=$(awk -F': ' '/Elapsed \(wall clock\)/ { n = split($2, t, ":"); s = 0;
                   for (k = 1; k <= n; k++) s = s * 60 + t[k]; printf "%.3f", s }' time.txt)
        rss=$(awk -F': ' '/Maximum resident set size/ { printf "%.1f", $2 / 1024 }' time.txt)
        cpu=$(awk -F': ' '/User time/ { u = $2 } /System time/ { s = $2 }
                  /Percent of CPU/ { p = $2 } END { printf "%.2f s CPU (%s)", u + s, p }' time.txt)
    else
        start=$(date +%s.%N)
        "$bin" ingest --lot BENCH-12500 --sweeps sim/sweeps.csv --db t.db --format csv \
            > out.txt 2> err.txt
        end=$(date +%s.%N)
        wall=$(echo "$start $end" | awk '{ printf "%.3f", $2 - $1 }')
        rss="n/a"
        cpu="CPU n/a"
    fi
    devices=$(awk -F': ' '/^# devices:/ { print $2 }' out.txt)
    echo "run $i: $wall s wall, $(echo "$rows $wall" | awk '{ printf "%.0f", $1 / $2 }') rows/s, peak RSS $rss MB, $cpu${devices:+, $devices devices}"
    if [ -z "$best" ] || [ "$(echo "$wall $best" | awk '{ print ($1 < $2) }')" = 1 ]; then
        best=$wall
        best_rss=$rss
    fi
done
# a CPU share well under 100 % means other processes held the cores
echo "load average: $(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo n/a) on $(nproc) cores"
echo "best: $best s wall, $(echo "$rows $best" | awk '{ printf "%.0f", $1 / $2 }') rows/s, peak RSS $best_rss MB (target < 2 s, < 200 MB)"
