#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): `splitlot predict` on a 200-split plan (2 dielectrics
# x 10 x 10 treatment levels) at 4 temperatures, into a fresh database and
# again unchanged; prints wall milliseconds, median of 5 runs each.
# Usage: tests/bench/bench_predict.sh [BUILD_DIR]   (from the repo root)
set -eu
build=${1:-build-release}
bin=$(cd "$build" && pwd)/splitlot
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
plan=$work/plan-200.yaml
{
    echo "lot: BENCH-200"
    echo "temperatures_K: [4, 77, 300, 400]"
    echo "device: { channel_length_um: 20, channel_width_um: 10 }"
    echo "wafer_map: { rows: 6, cols: 6 }"
    echo "baseline_doping_per_cm2: { mean: -2.0e12, sigma: 0.8e12 }"
    echo "dielectrics:"
    echo "  - { name: ox90, layers: [ { material: SiO2, thickness_nm: 90, sigma_nm: 2 } ] }"
    echo "  - { name: hfo10, layers: [ { material: HfO2, thickness_nm: 10, sigma_nm: 0.5 }, { material: Al2O3, thickness_nm: 2 } ] }"
    echo "treatments:"
    for i in 1 2 3 4 5 6 7 8 9; do
        echo "  - { name: a$i, doping_per_cm2: { mean: ${i}.0e11, sigma: 1.0e11 } }"
        echo "  - { name: b$i, doping_per_cm2: { mean: -${i}.0e11, sigma: 1.0e11 } }"
    done
    echo "design:"
    echo "  kind: full-factorial"
    echo "  factors:"
    echo "    dielectric: [ox90, hfo10]"
    echo "    fa: [none, a1, a2, a3, a4, a5, a6, a7, a8, a9]"
    echo "    fb: [none, b1, b2, b3, b4, b5, b6, b7, b8, b9]"
    echo "  wafers_per_split: 1"
    echo "wafers: 200"
    echo "devices_per_wafer: 36"
    echo "resolve: { shift_V: 0.5, device_sigma_V: 0.6 }"
} > "$plan"
ms() { # wall milliseconds of one predict
    s=$(date +%s%N); "$bin" predict "$plan" --db "$1" --format json >/dev/null 2>&1; e=$(date +%s%N)
    echo $(((e - s) / 1000000))
}
fresh=""; again=""
for i in 1 2 3 4 5; do
    rm -f "$work/p.db"*
    fresh="$fresh $(ms "$work/p.db")"
    again="$again $(ms "$work/p.db")"
done
med() { printf '%s\n' $* | sort -n | sed -n 3p; }
echo "predict, 200 splits x 4 temperatures: new database $(med $fresh) ms, unchanged plan $(med $again) ms (median of 5)"
