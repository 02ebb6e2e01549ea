#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): `splitlot compare` of a 12,500-device lot that has
# three measurement runs: its sweeps at 300 K, a re-probe of every device at
# 300 K (results; it supersedes the first) and the sweeps at 77 K
# (tests/bench/plan-12500.yaml with a second temperature). Prints wall
# seconds, CPU and peak RSS of each compare (GNU time), the median, and the
# same for a 1,250-device lot of three runs, whose peak RSS the big one's
# should match (flat memory).
# Usage: tests/bench/bench_runs.sh [BUILD_DIR] [RUNS]   (from the repo root)
set -eu
build=${1:-build-release}
runs=${2:-3}
bin=$(cd "$build" && pwd)/splitlot
here=$(cd "$(dirname "$0")" && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work"
if ! /usr/bin/time -v true > /dev/null 2>&1; then
    echo "needs GNU time (/usr/bin/time, package 'time')" >&2
    exit 1
fi

lot_of() { # devices_per_wafer -> db with three runs of lot BENCH-12500
    sed -e 's/^expected_yield: .*/expected_yield: 1.0/' -e 's/^temperatures_K: .*/temperatures_K: [300, 77]/' \
        -e "s/^devices_per_wafer: .*/devices_per_wafer: $1/" "$here/plan-12500.yaml" > plan-$1.yaml
    "$bin" predict plan-$1.yaml --db lot-$1.db --format csv > /dev/null 2>&1
    "$bin" simulate plan-$1.yaml --out sim-$1 --seed 12500 > /dev/null
    # the sweeps at both temperatures (runs 1 and 2), then the re-probe: the
    # results at 300 K only (run 3)
    "$bin" ingest --lot BENCH-12500 --sweeps sim-$1/sweeps.csv --db lot-$1.db --format csv > /dev/null
    awk -F, 'NR == 1 || $NF == 300' sim-$1/results.csv > reprobe-$1.csv
    "$bin" ingest --lot BENCH-12500 --results reprobe-$1.csv --db lot-$1.db --format csv > /dev/null
}

time_compare() { # devices_per_wafer label
    i=0
    : > walls.txt
    while [ "$i" -lt "$runs" ]; do
        i=$((i + 1))
        /usr/bin/time -v -o time.txt "$bin" compare --lot BENCH-12500 --db lot-$1.db \
            --format json > out.json
        wall=$(awk -F': ' '/Elapsed \(wall clock\)/ { n = split($2, t, ":"); s = 0;
                   for (k = 1; k <= n; k++) s = s * 60 + t[k]; printf "%.3f", s }' time.txt)
        rss=$(awk -F': ' '/Maximum resident set size/ { printf "%.1f", $2 / 1024 }' time.txt)
        cpu=$(awk -F': ' '/User time/ { u = $2 } /System time/ { s = $2 } END { printf "%.2f", u + s }' time.txt)
        echo "$2 run $i: $wall s wall, $cpu s CPU, peak RSS $rss MB"
        echo "$wall" >> walls.txt
    done
    echo "$2 median: $(sort -n walls.txt | awk '{ a[NR] = $1 } END { print a[int((NR + 1) / 2)] }') s wall"
}

lot_of 250
"$bin" compare --lot BENCH-12500 --db lot-250.db --format csv > c.csv
echo "12,500-device lot: $(awk -F': ' '/^# device_count/ { print $2 }' c.csv) devices in the view, runs:"
awk -F, '/^run,step/ { on = 1; next } on && NF > 5 { print "  run " $1 ": " $2 ", " $3 " K, " $4 " devices" } on && NF <= 5 { on = 0 }' c.csv
time_compare 250 "12,500 devices"
lot_of 25
time_compare 25 "1,250 devices"
echo "load average: $(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo n/a) on $(nproc) cores"
