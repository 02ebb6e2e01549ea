#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): the 12,500-device sweep import (tests/bench/plan-12500.yaml,
# 201 points a device) in the shapes instrument files come in, against a
# reference binary (another build, e.g. of the release before), back to back:
#   plain      wafer,device,die_x,die_y,vg_V,r_ohm (the reference reads this)
#   units      semicolon separator, "Vg [V]", "Id [A]", "Vd [V]" (R = V_d / I_d)
#   double     each sweep forward and back (twice the points, two fits a device)
# Prints the median wall seconds of RUNS rounds (each round runs the four
# imports once, in turn, starting one further on each round), and the ratios; with /usr/bin/time also the median
# CPU seconds (user + system), steadier than the wall clock on a shared
# machine.
# Usage: tests/bench/bench_ingest_formats.sh BUILD_DIR REFERENCE_BUILD_DIR [RUNS]
set -eu
bin=$(cd "$1" && pwd)/splitlot
ref=$(cd "$2" && pwd)/splitlot
runs=${3:-5}
here=$(cd "$(dirname "$0")" && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work"

sed 's/^expected_yield: .*/expected_yield: 1.0/' "$here/plan-12500.yaml" > plan.yaml
"$bin" predict plan.yaml --db mine.db --format csv > /dev/null 2>&1
"$ref" predict plan.yaml --db ref.db --format csv > /dev/null 2>&1
"$bin" simulate plan.yaml --out sim --seed 12500 > /dev/null
# drain current at 0.1 V drain bias, written as a meter does (7 digits)
awk -F, 'NR == 1 { print "wafer;device;die_x;die_y;Vg [V];Id [A];Vd [V]"; next }
         { printf "%s;%s;%s;%s;%s;%.7g;0.1\n", $1, $2, $3, $4, $5, 0.1 / $6 }' \
    sim/sweeps.csv > units.csv
# every device's rows, then the same rows in reverse order
awk -F, 'NR == 1 { print; next }
         { key = $1 "," $2 }
         key != last && n { for (i = n; i >= 1; i--) print row[i]; n = 0 }
         { print; row[++n] = $0; last = key }
         END { for (i = n; i >= 1; i--) print row[i] }' sim/sweeps.csv > double.csv
echo "rows: plain $(($(wc -l < sim/sweeps.csv) - 1)), units $(($(wc -l < units.csv) - 1)), double $(($(wc -l < double.csv) - 1))"

timer=""
if /usr/bin/time -f "%e" true > /dev/null 2>&1; then
    timer=/usr/bin/time
fi

median() { sort -n "$1" | awk '{ t[NR] = $1 } END { print t[int((NR + 1) / 2)] }'; }

# one import of file $2 by binary $1 into a copy of db $3; its wall and CPU
# seconds appended to $4.wall and $4.cpu
time_one() {
    cp "$3" t.db
    rm -f t.db-wal t.db-shm
    sync # the disk idle at the start: the writes of the run before are not this one's
    start=$(date +%s.%N)
    if [ -n "$timer" ]; then
        $timer -f "%U %S" -o cpu1.txt "$1" ingest --lot BENCH-12500 --sweeps "$2" --db t.db \
            --format csv > out.txt 2> err.txt || { cat err.txt >&2; exit 1; }
        awk '{ printf "%.3f\n", $1 + $2 }' cpu1.txt >> "$4.cpu"
    else
        "$1" ingest --lot BENCH-12500 --sweeps "$2" --db t.db --format csv > out.txt \
            2> err.txt || { cat err.txt >&2; exit 1; }
        echo 0 >> "$4.cpu"
    fi
    end=$(date +%s.%N)
    echo "$start $end" | awk '{ printf "%.4f\n", $2 - $1 }' >> "$4.wall"
}

time_shape() {
    case $1 in
    0) time_one "$ref" sim/sweeps.csv ref.db ref_plain ;;
    1) time_one "$bin" sim/sweeps.csv mine.db mine_plain ;;
    2) time_one "$bin" units.csv mine.db mine_units ;;
    3) time_one "$bin" double.csv mine.db mine_double ;;
    esac
}

# interleaved, round by round, so a change of load on the machine hits every
# shape alike; each round starts one shape further on, so every shape follows
# every other equally often (an import leaves the disk and caches busy for
# the next one)
for shape in ref_plain mine_plain mine_units mine_double; do
    : > $shape.wall
    : > $shape.cpu
done
i=0
while [ "$i" -lt "$runs" ]; do
    for k in 0 1 2 3; do
        time_shape $(((i + k) % 4))
    done
    i=$((i + 1))
done
ref_plain="$(median ref_plain.wall) $(median ref_plain.cpu)"
mine_plain="$(median mine_plain.wall) $(median mine_plain.cpu)"
mine_units="$(median mine_units.wall) $(median mine_units.cpu)"
mine_double="$(median mine_double.wall) $(median mine_double.cpu)"
grep -q '^# double_sweeps: 12500' out.txt || echo "warning: not every device was fitted as a double sweep"
echo "median of $runs runs, wall and CPU seconds: reference plain $ref_plain, plain $mine_plain," \
     "units+semicolon $mine_units, double $mine_double"
echo "$ref_plain $mine_plain $mine_units $mine_double" |
    awk '{ printf "wall ratios to the reference: plain %.3f, units+semicolon %.3f (target <= 1.10), double %.3f (target <= 2.2)\n", $3 / $1, $5 / $1, $7 / $1;
           if ($2 > 0) printf "CPU ratios to the reference:  plain %.3f, units+semicolon %.3f, double %.3f\n", $4 / $2, $6 / $2, $8 / $2 }'
echo "load average: $(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo n/a) on $(nproc) cores"
