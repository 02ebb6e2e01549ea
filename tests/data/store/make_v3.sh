#!/bin/sh
# SPDX-License-Identifier: MIT
# Makes v3.db, a database written by splitlot at schema version 3 (before
# measurement runs), for the migration test in tests/test_store.c, and the
# dumps that test compares against: every device row with every number
# (v3-devices.csv) and every sweep blob in hex (v3-sweeps.csv).
# Usage, from the repository root with a build of that release:
#   tests/data/store/make_v3.sh BUILD/splitlot
# Needs the sqlite3 shell. The lots: STATS-01 (device results, the analysis
# fixture) and MIGRATE-SWEEPS (simulated sweeps, fitted on import).
set -eu
bin=$(cd "$(dirname "$1")" && pwd)/$(basename "$1")
here=$(cd "$(dirname "$0")" && pwd)
data=$(cd "$here/.." && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
db="$work/v3.db"
# file names relative to the work folder, so the database names no path of
# the machine that made it
cp "$data/analyze/stats-lot.yaml" "$data/analyze/stats-results.csv" "$here/sweeps-lot.yaml" "$work/"
cd "$work"
"$bin" predict stats-lot.yaml --db v3.db --format csv > /dev/null 2>&1
"$bin" ingest --lot STATS-01 --results stats-results.csv --db v3.db --format csv > /dev/null
"$bin" predict sweeps-lot.yaml --db v3.db --format csv > /dev/null 2>&1
"$bin" simulate sweeps-lot.yaml --out sim --seed 3 > /dev/null
"$bin" ingest --lot MIGRATE-SWEEPS --sweeps sim/sweeps.csv --db v3.db --format csv > /dev/null
# one file, small pages
sqlite3 "$db" "PRAGMA wal_checkpoint(TRUNCATE); PRAGMA journal_mode = DELETE; PRAGMA page_size = 4096; VACUUM;" > /dev/null
test "$(sqlite3 "$db" 'PRAGMA user_version')" = 3
# every device: lot, wafer name, identity and each stored number to 17 digits
sqlite3 -csv -header "$db" "SELECT l.name AS lot, w.name AS wafer, d.name AS device, d.id,
  d.die_x, d.die_y, d.source, d.fit_class, quote(d.fit_model) AS fit_model,
  CASE WHEN d.cnp_V IS NULL THEN 'NULL' ELSE printf('%!.17g', d.cnp_V) END AS cnp_V, CASE WHEN d.cnp_sigma_V IS NULL THEN 'NULL' ELSE printf('%!.17g', d.cnp_sigma_V) END AS cnp_sigma_V,
  CASE WHEN d.mobility_cm2_per_Vs IS NULL THEN 'NULL' ELSE printf('%!.17g', d.mobility_cm2_per_Vs) END AS mobility_cm2_per_Vs,
  CASE WHEN d.mobility_sigma_cm2_per_Vs IS NULL THEN 'NULL' ELSE printf('%!.17g', d.mobility_sigma_cm2_per_Vs) END AS mobility_sigma_cm2_per_Vs,
  CASE WHEN d.n0_per_cm2 IS NULL THEN 'NULL' ELSE printf('%!.17g', d.n0_per_cm2) END AS n0_per_cm2, CASE WHEN d.n0_sigma_per_cm2 IS NULL THEN 'NULL' ELSE printf('%!.17g', d.n0_sigma_per_cm2) END AS n0_sigma_per_cm2,
  CASE WHEN d.r_contact_ohm IS NULL THEN 'NULL' ELSE printf('%!.17g', d.r_contact_ohm) END AS r_contact_ohm,
  CASE WHEN d.r_contact_sigma_ohm IS NULL THEN 'NULL' ELSE printf('%!.17g', d.r_contact_sigma_ohm) END AS r_contact_sigma_ohm,
  CASE WHEN d.rel_rms IS NULL THEN 'NULL' ELSE printf('%!.17g', d.rel_rms) END AS rel_rms, CASE WHEN d.r_squared IS NULL THEN 'NULL' ELSE printf('%!.17g', d.r_squared) END AS r_squared,
  quote(d.n_points) AS n_points, quote(d.n_spikes) AS n_spikes, quote(d.source_line) AS source_line
  FROM device d JOIN wafer w ON w.id = d.wafer_id JOIN lot l ON l.id = d.lot_id ORDER BY d.id" \
  > "$here/v3-devices.csv"
sqlite3 -csv -header "$db" "SELECT device_id, n_points, hex(points) AS points FROM sweep ORDER BY device_id" \
  > "$here/v3-sweeps.csv"
cp "$db" "$here/v3.db"
