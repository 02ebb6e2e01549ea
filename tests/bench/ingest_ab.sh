#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): the 12,500-device sweeps import of bench_ingest.sh
# by two builds of splitlot, run alternately on the same file (A, B, A, B,
# ...) so that the machine's load falls on both alike; prints each run and
# both medians of wall and CPU time. For "within N % of the other build".
# Usage: tests/bench/ingest_ab.sh SPLITLOT_A SPLITLOT_B [RUNS]   (from the repo root)
set -eu
a=$(cd "$(dirname "$1")" && pwd)/$(basename "$1")
b=$(cd "$(dirname "$2")" && pwd)/$(basename "$2")
runs=${3:-3}
here=$(cd "$(dirname "$0")" && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work"
sed 's/^expected_yield: .*/expected_yield: 1.0/' "$here/plan-12500.yaml" > plan.yaml
"$a" predict plan.yaml --db a.db --format csv > /dev/null 2>&1
"$b" predict plan.yaml --db b.db --format csv > /dev/null 2>&1
"$b" simulate plan.yaml --out sim --seed 12500 > /dev/null
i=0
while [ "$i" -lt "$runs" ]; do
    i=$((i + 1))
    for side in a b; do
        bin=$a
        [ "$side" = b ] && bin=$b
        cp $side.db t.db
        rm -f t.db-wal t.db-shm
        /usr/bin/time -f "%e %U %S %M" -o time.txt "$bin" ingest --lot BENCH-12500 \
            --sweeps sim/sweeps.csv --db t.db --format csv > /dev/null
        read -r wall user sys rss < time.txt
        cpu=$(echo "$user $sys" | awk '{ printf "%.2f", $1 + $2 }')
        echo "$side run $i: $wall s wall, $cpu s CPU, peak RSS $((rss / 1024)) MB"
        echo "$wall $cpu" >> $side.txt
    done
done
median() { sort -n -k"$2" "$1" | awk -v k="$2" '{ a[NR] = $k } END { print a[int((NR + 1) / 2)] }'; }
for side in a b; do
    echo "$side median: $(median $side.txt 1) s wall, $(median $side.txt 2) s CPU"
done
echo "load average: $(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo n/a) on $(nproc) cores"
