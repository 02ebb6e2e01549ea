#!/bin/sh
# SPDX-License-Identifier: MIT
# The lot report in a real browser: builds a lot with three devices moved far
# off, renders its report, has headless Chromium parse it (--dump-dom) and
# take a screenshot, and checks the parsed page against compare's JSON: die and
# flag counts, the flag interval as the band, every verdict card (the planned
# mobility's too), per split the medians and spreads of mobility, n0 and
# hysteresis with their units and the parameter charts, one colour scale.
# Usage: check_report.sh SPLITLOT SOURCE_DIR. Without Chromium it reports
# itself skipped (exit 77, ctest's skip code), unless SL_REQUIRE_BROWSER=1
# (CI sets it: there a missing browser is a failure); SL_SKIP_BROWSER=1 skips
# it even with Chromium.
set -eu

# absolute paths: the work happens in a scratch folder
splitlot=$(cd "$(dirname "$1")" && pwd)/$(basename "$1")
source_dir=$(cd "$2" && pwd)
browser=${CHROMIUM:-chromium}

if [ "${SL_SKIP_BROWSER:-}" = 1 ]; then
    echo "skipped: SL_SKIP_BROWSER=1"
    exit 77
fi
if ! command -v "$browser" >/dev/null 2>&1; then
    if [ "${SL_REQUIRE_BROWSER:-}" = 1 ]; then
        echo "error: '$browser' not found: install chromium (.ci/install-deps test)" >&2
        exit 1
    fi
    echo "skipped: '$browser' not found (.ci/install-deps test installs it)"
    exit 77
fi

work=$(mktemp -d "${TMPDIR:-/tmp}/splitlot-browser-XXXXXX")
trap 'rm -rf "$work"' EXIT INT TERM
cd "$work"

fail() {
    echo "error: $*" >&2
    exit 1
}

# ---- the lot: demo plan, results with three devices moved 15 V up ----------
# with a planned mobility per dielectric: ox90 at the simulator's median
# (2000 cm^2/Vs, src/simulate.c), alox20 at 5000 +/- 500, which its devices miss
sed -e 's/^lot: DEMO-01/lot: BROWSER-01/' \
    -e '/doping_per_cm2: { mean: 0, sigma: 0.2e12 }/a\
    mobility_cm2_per_Vs: { mean: 2000, sigma: 300 }' \
    -e '/doping_per_cm2: { mean: 0.5e12, sigma: 0.3e12 }/a\
    mobility_cm2_per_Vs: { mean: 5000, sigma: 500 }' \
    "$source_dir/plans/demo.yaml" >plan.yaml
[ "$(grep -c 'mobility_cm2_per_Vs:' plan.yaml)" -eq 2 ] || fail "the plan has no planned mobilities"
"$splitlot" predict plan.yaml --db t.db >/dev/null 2>&1
"$splitlot" simulate plan.yaml --out sim --seed 11 --no-sweeps \
    --true-doping anneal-350=0.3e12 >/dev/null
awk -F, 'BEGIN { OFS = "," }
         NR > 1 && $5 != "" && NR >= next_row && moved < 3 { $5 = $5 + 15; moved++; next_row = NR + 97 }
         { print }' next_row=100 sim/results.csv >results.csv
"$splitlot" ingest --lot BROWSER-01 --results results.csv --db t.db >/dev/null
"$splitlot" report --lot BROWSER-01 --out report.html --db t.db >/dev/null
"$splitlot" compare --lot BROWSER-01 --db t.db --format json >compare.json

# ---- what the analysis says (one device per die in the demo plan) ----------
grep '"device": .*"cnp_predicted_V"' compare.json >device_rows
devices=$(wc -l <device_rows | tr -d ' ')
flagged=$(sed -n 's/^ *"flagged": \([0-9]*\),$/\1/p' compare.json)
flagged_usable=$(grep '"cnp_measured_V": [-0-9]' device_rows | grep -vc '"flags": \[\]' || true)
[ "$flagged_usable" -ge 3 ] || fail "expected the 3 moved devices flagged, got $flagged_usable"

# ---- the browser ----------------------------------------------------------
browse() {
    profile=$(mktemp -d "$work/profile-XXXXXX")
    timeout 180 "$browser" --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
        --disable-background-networking --disable-component-update --disable-sync \
        --user-data-dir="$profile" "$@" "file://$work/report.html" 2>>browser.log
}
browse --dump-dom >dom.html || { cat browser.log >&2; fail "chromium --dump-dom failed"; }
browse --screenshot="$work/shot.png" --window-size=1280,2400 >/dev/null ||
    { cat browser.log >&2; fail "chromium --screenshot failed"; }

# ---- the parsed page ------------------------------------------------------
count() { grep -o "$1" dom.html | wc -l | tr -d ' '; }

grep -q '<title>Lot report BROWSER-01: Back-gate doping split' dom.html ||
    fail "the page's title is not in the parsed DOM"
grep -q '<h1>Lot report BROWSER-01</h1>' dom.html || fail "no heading in the parsed DOM"
dies=$(($(count 'class="die"') + $(count 'class="die ')))
[ "$dies" -eq "$devices" ] || fail "$dies die elements, the analysis has $devices devices"
n=$(count 'class="die flagged"')
[ "$n" -eq "$flagged" ] || fail "$n flagged dies, compare flags $flagged devices"
# the splits section alone: the device-parameter charts mark flagged devices too
awk 'BEGIN { RS = "<section id=\"" } /^splits"/ { print }' dom.html > splits.html
n=$(grep -o 'class="point flagged"' splits.html | wc -l | tr -d ' ')
[ "$n" -eq "$flagged_usable" ] || fail "$n flagged markers, $flagged_usable flagged usable devices"
[ "$(count '<figure class="strip parameter"')" -ge 2 ] || fail "no mobility and n0 charts"
grep -q "data-verdict=\"flagged\" data-count=\"$flagged\"" dom.html ||
    fail "the flagged verdict does not say $flagged"
[ "$(count '<script')" -eq 0 ] || fail "the page has a script"

# the band drawn is the flag interval: one per split, named in each strip's legend
splits=$(grep -c '"prediction_in_ci"' compare.json)
n=$(count 'class="band sigma3 flag-interval"')
[ "$n" -eq "$splits" ] || fail "$n flag-interval bands, $splits splits"
dielectrics=$(count '<figure class="strip">')
n=$(count '>flag interval</text>')
[ "$n" -eq "$dielectrics" ] || fail "$n legends name the flag interval, $dielectrics strip charts"

# every verdict card: the four verdicts of the levels (not the intercept) with
# compare's counts,
# flagged devices, splits out of range and predictions outside the CI
for v in off-plan differs as-planned inconclusive; do
    k=$(awk -v v="\"$v\"" '/"factor": / { level = ($2 != "\"intercept\",") }
                             /"verdict": / && level && index($0, v) { n++ } END { print n + 0 }' \
        compare.json)
    grep -q "data-verdict=\"$v\" data-count=\"$k\"" dom.html || fail "the $v card does not say $k"
done
outside_ci=$(grep -c '"prediction_in_ci": false' compare.json || true)
grep -q "data-verdict=\"prediction-outside-ci\" data-count=\"$outside_ci\"" dom.html ||
    fail "the prediction-outside-ci card does not say $outside_ci"
grep -q 'data-verdict="cnp-outside" data-count="' dom.html || fail "no cnp-outside card"
mobility_off=$(sed -n 's/^ *"splits_mobility_off_plan": \([0-9]*\),$/\1/p' compare.json)
[ "$mobility_off" -eq 4 ] || fail "compare judges $mobility_off splits' mobility off plan, 4 expected"
grep -q "data-verdict=\"mobility-off-plan\" data-count=\"$mobility_off\"" dom.html ||
    fail "the mobility-off-plan card does not say $mobility_off"
[ "$(count '<li class="verdict')" -eq 8 ] || fail "$(count '<li class="verdict') verdict cards, 8 expected"

# per split: median and spread of mobility (compare's, to 4 digits), n0 and
# hysteresis in the parameters table, with units; the planned mobility and
# its judgement; a chart per parameter with its unit, or a note without values
awk 'BEGIN { RS = "<section id=\"" } /^parameters"/ { print }' dom.html > parameters.html
rows=$(grep -o '<tr[^>]*data-split="' parameters.html | wc -l | tr -d ' ')
[ "$rows" -eq "$splits" ] || fail "$rows rows in the parameters table, $splits splits"
for unit in 'mobility median (cm²/V&nbsp;s)' 'n<sub>0</sub> median (cm<sup>−2</sup>)' \
    'hysteresis median (V)' 'planned mobility (cm²/V&nbsp;s)'; do
    grep -qF "$unit" parameters.html || fail "the parameters table has no heading '$unit'"
done
grep '^ *{"split": ' compare.json | sed -n '/"mobility_median_cm2_per_Vs"/p' |
    awk -F'"mobility_median_cm2_per_Vs": ' '{ split($1, a, "\""); split($2, b, ","); 
        printf "%s %.4g\n", a[4], b[1] }' > medians
[ "$(wc -l < medians | tr -d ' ')" -eq "$splits" ] || fail "compare gives no mobility medians"
while read -r split median; do
    grep -q "<tr[^>]*data-split=\"$split\"[^>]*><td>$split</td><td class=\"num\">$median</td>" \
        parameters.html || fail "split $split: no mobility median $median in the table"
done < medians
[ "$(grep -c '<td>off plan</td>' parameters.html)" -eq "$mobility_off" ] ||
    fail "the table does not mark $mobility_off splits off plan"
grep -q 'data-parameter="mobility"' parameters.html || fail "no mobility chart"
grep -q 'data-parameter="n0"' parameters.html || fail "no n0 chart"
grep -qF 'mobility (log₁₀ cm²/V s)' parameters.html || fail "the mobility axis has no unit"
grep -qF 'n₀ (log₁₀ cm⁻²)' parameters.html || fail "the n0 axis has no unit"
grep -q 'No device of this view has a hysteresis' parameters.html ||
    fail "results without hysteresis: no note in place of its chart"

# one colour scale: one legend for every wafer map, each map with die coordinates
[ "$(count '<figure class="wafer-legend"')" -eq 1 ] || fail "not exactly one wafer-map legend"
grep -q '>no device at this die</text>' dom.html || fail "the legend lacks the bare-wafer cell"
maps=$(count '<figure class="wafer">')
[ "$(count '<g class="die-axis">')" -eq "$maps" ] || fail "maps without die coordinates"

size=$(wc -c <shot.png | tr -d ' ')
[ "$size" -gt 20000 ] || fail "screenshot of $size bytes: nothing rendered"
echo "ok: $devices dies, $flagged flagged, $flagged_usable flagged markers; screenshot $size bytes"
