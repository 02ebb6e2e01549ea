#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test) of the analysis: `splitlot compare` on one lot of
# 12,500 devices (tests/bench/plan-12500.yaml, results only; and the same lot
# imported as sweeps with many devices whose neutrality point lies beyond the
# sweep, so the censored-normal wafer means are at work), its peak memory
# against a lot four times the size, and `splitlot history` over 100 stored
# lots (the demo plan under 100 lot names, results only). Prints wall and CPU
# seconds, best of RUNS runs; targets: compare < 0.3 s, history < 1 s.
# Usage: tests/bench/bench_analyze.sh [BUILD_DIR] [RUNS]   (from the repo root)
set -eu
build=${1:-build-release}
runs=${2:-5}
bin=$(cd "$build" && pwd)/splitlot
here=$(cd "$(dirname "$0")" && pwd)
demo=$(cd "$here/../../plans" && pwd)/demo.yaml
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work"

# best (lowest wall) of $runs runs of the command in "$@": "wall user+sys"
best_of() {
    best=""
    i=0
    while [ "$i" -lt "$runs" ]; do
        i=$((i + 1))
        if /usr/bin/time -f '%e %U %S' -o time.txt "$@" > out.txt 2> err.txt; then :; else
            echo "failed: $*" >&2
            cat err.txt >&2
            exit 1
        fi
        line=$(awk 'END { printf "%.3f %.3f", $1, $2 + $3 }' time.txt)
        if [ -z "$best" ] || awk -v a="$line" -v b="$best" \
            'BEGIN { split(a, x, " "); split(b, y, " "); exit !(x[1] < y[1]) }'; then
            best=$line
        fi
    done
    echo "$best"
}

report() { # name, target seconds, "wall cpu"
    echo "$3" | awk -v name="$1" -v target="$2" '{
        printf "%-40s %6.3f s wall  %6.3f s cpu  (target < %s s: %s)\n", name, $1, $2, target,
               $1 < target ? "met" : "MISSED" }'
}

if ! /usr/bin/time -f '%e' true > /dev/null 2>&1; then
    echo "bench_analyze: needs GNU time at /usr/bin/time" >&2
    exit 1
fi

# one lot of 50 wafers x 250 devices
"$bin" predict "$here/plan-12500.yaml" --db big.db > /dev/null 2>&1
"$bin" simulate "$here/plan-12500.yaml" --out big --devices-per-wafer 250 --no-sweeps > /dev/null
"$bin" ingest --lot BENCH-12500 --results big/results.csv --db big.db > /dev/null
devices=$(($(wc -l < big/results.csv) - 1))
echo "compare: lot of $devices devices; history: 100 lots of the demo plan; $(nproc) cores"
report "compare (json), $devices devices" 0.3 \
    "$(best_of "$bin" compare --lot BENCH-12500 --db big.db --format json)"
report "compare (table), $devices devices" 0.3 \
    "$(best_of "$bin" compare --lot BENCH-12500 --db big.db)"

# peak resident memory of compare (json) on a lot of n devices per wafer
peak_kb() {
    /usr/bin/time -f '%M' -o rss.txt "$bin" compare --lot BENCH-12500 --db "$1" --format json \
        > /dev/null
    cat rss.txt
}
"$bin" predict "$here/plan-12500.yaml" --db huge.db > /dev/null 2>&1
"$bin" simulate "$here/plan-12500.yaml" --out huge --devices-per-wafer 1000 --no-sweeps > /dev/null
"$bin" ingest --lot BENCH-12500 --results huge/results.csv --db huge.db > /dev/null
huge=$(($(wc -l < huge/results.csv) - 1))
echo "compare peak memory: $(peak_kb big.db) kB at $devices devices, $(peak_kb huge.db) kB at $huge devices"

# the same lot from sweeps (41 points), a tenth of the devices faulty: about
# a quarter of those lie beyond the sweep and enter their wafer's mean censored
"$bin" predict "$here/plan-12500.yaml" --db swept.db > /dev/null 2>&1
"$bin" simulate "$here/plan-12500.yaml" --out swept --devices-per-wafer 250 --points 41 \
    --fault-fraction 0.1 > /dev/null
"$bin" ingest --lot BENCH-12500 --sweeps swept/sweeps.csv --db swept.db > /dev/null
censored=$("$bin" compare --lot BENCH-12500 --db swept.db --format json 2> /dev/null |
           sed -n 's/^  "censored": \([0-9]*\),$/\1/p')
report "compare (json), sweeps, $censored censored" 0.3 \
    "$(best_of "$bin" compare --lot BENCH-12500 --db swept.db --format json)"

# 100 lots, each its own simulation
n=1
while [ "$n" -le 100 ]; do
    lot=$(printf 'HIST-%03d' "$n")
    sed "s/^lot: .*/lot: $lot/" "$demo" > plan.yaml
    "$bin" predict plan.yaml --db hist.db > /dev/null 2>&1
    "$bin" simulate plan.yaml --out sim --seed "$n" --no-sweeps > /dev/null
    "$bin" ingest --lot "$lot" --results sim/results.csv --db hist.db > /dev/null
    n=$((n + 1))
done
report "history (json), 100 lots" 1 "$(best_of "$bin" history --db hist.db --format json)"
report "history --emit-yaml, 100 lots" 1 "$(best_of "$bin" history --db hist.db --emit-yaml)"
