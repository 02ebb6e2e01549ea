#!/bin/sh
# SPDX-License-Identifier: MIT
# Benchmark (not a test): splitlot's import-fit-store plus compare against the
# pandas + SciPy script an engineer would write (reference/fit_reference.py),
# on simulated lots of 1,000, 12,500 and 50,000 devices x 201 points. Wall time
# and peak memory are measured here with GNU time, each the median of RUNS runs
# (default 5: on a shared 2-core machine single runs of either side move by 20 %).
# Usage: [RUNS=N] tests/bench/vs_reference.sh [BUILD_DIR] [SIZES...]   (from the repo root)
set -eu
here=$(cd "$(dirname "$0")" && pwd)
build=${1:-build-release}
[ $# -gt 0 ] && shift
sizes=${*:-1000 12500 50000}
runs=${RUNS:-5}
bin=$(cd "$build" && pwd)/splitlot
plan=$here/plan-vs-reference.yaml
py=/usr/bin/python3
SL_EXTRA_PACKAGES="time python3-pandas python3-scipy" "$here/../../.ci/install-deps"
[ -x "$bin" ] || { echo "build splitlot first (make bench builds $build)" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cg=3.83681472e-4   # 90 nm SiO2: eps0 * 3.9 / 90 nm, F/m^2
lw=2               # 20 um / 10 um

# "seconds kilobytes" of one command
measure() { /usr/bin/time -f "%e %M" -o "$work/time" "$@" >/dev/null 2>&1; cat "$work/time"; }
# median of the numbers on stdin, one a line
median() { sort -g | awk '{ v[NR] = $1 } END { print v[int((NR + 1) / 2)] }'; }
# run a "seconds kilobytes" measurement $runs times: "median_seconds median_kilobytes"
medians() {
    i=0; : >"$work/runs"
    while [ "$i" -lt "$runs" ]; do "$@" >>"$work/runs"; i=$((i + 1)); done
    echo "$(cut -d' ' -f1 "$work/runs" | median) $(cut -d' ' -f2 "$work/runs" | median)"
}

run_splitlot() { # dir -> "seconds kilobytes"
    cp "$1/template.db" "$1/s.db"; rm -f "$1/s.db-wal" "$1/s.db-shm"
    a=$(measure "$bin" ingest --lot BENCH-REF --sweeps "$1/sweeps.csv" --db "$1/s.db")
    b=$(measure "$bin" compare --lot BENCH-REF --db "$1/s.db" --format json)
    echo "$a $b" | awk '{ printf "%.3f %d\n", $1 + $3, ($2 > $4 ? $2 : $4) }'
}

run_reference() { rm -f "$1/r.db"; measure "$py" "$here/reference/fit_reference.py" "$1/sweeps.csv" "$1/r.db" $cg $lw; }

agreement() {
    "$py" - "$1/s.db" "$1/r.db" <<'PY'
import sqlite3, sys, numpy as np
s = sqlite3.connect(sys.argv[1]).execute(
    "SELECT d.wafer, d.name, m.cnp_V FROM device d JOIN measurement m ON m.device_id = d.id "
    "WHERE m.fit_class = 'ok'").fetchall()
r = {(w, d): v for w, d, v, c in sqlite3.connect(sys.argv[2]).execute(
    "SELECT wafer, device, cnp_V, fit_class FROM device") if c == "ok"}
diff = np.array([abs(v - r[(w, d)]) for w, d, v in s if (w, d) in r])
print("%.2e %.2e %d" % (np.median(diff), np.percentile(diff, 99), len(diff)))
PY
}

printf '%-8s %-10s %9s %9s %12s %8s %12s %12s\n' devices tool wall_s peak_MB rows_per_s ratio dVcnp_med_V dVcnp_p99_V
for n in $sizes; do
    dir=$work/$n; mkdir -p "$dir"
    "$bin" simulate "$plan" --out "$dir" --devices-per-wafer $((n / 50)) >/dev/null
    rows=$(($(wc -l < "$dir/sweeps.csv") - 1))
    "$bin" predict "$plan" --db "$dir/template.db" >/dev/null 2>&1
    s=$(medians run_splitlot "$dir"); r=$(medians run_reference "$dir")
    st=${s% *}; sm=${s#* }; rt=${r% *}; rm_=${r#* }
    agree=$(agreement "$dir")
    awk -v n=$n -v rows=$rows -v st=$st -v sm=$sm -v rt=$rt -v rm=$rm_ -v ag="$agree" 'BEGIN {
        split(ag, a, " ");
        printf "%-8d %-10s %9.2f %9.1f %12.0f %8s %12s %12s\n", n, "splitlot", st, sm / 1024, rows / st, "", a[1], a[2];
        printf "%-8d %-10s %9.2f %9.1f %12.0f %8.1f\n", n, "reference", rt, rm / 1024, rows / rt, rt / st }'
    rm -rf "$dir"
done
