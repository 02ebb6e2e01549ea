/* SPDX-License-Identifier: MIT
 * Lots moved between two stores, whatever their backends (see
 * include/splitlot/store.h): every row of a lot copied in its order with new
 * ids, and a checksum of what a store holds of a lot that does not depend on
 * ids or backend, so a copy can be checked against its source.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "sha256.h"
#include "store_internal.h"

/* ---- reading a query into a digest ---- */

/* Column kinds of a hashed query: 'i' integer, 'r' real, 't' text, 'b' blob,
 * 'R' a run id (hashed as the run's place among the lot's runs), '-' skip. */
typedef struct {
    sha256_ctx sha;
    long *run_ids;               /* the lot's runs, oldest first */
    size_t n_runs;
} digest;

static void put(digest *d, const char *kind, const void *bytes, size_t n)
{
    char head[32];
    int k = snprintf(head, sizeof head, "%s%zu:", kind, n);
    sl__sha256_update(&d->sha, head, (size_t)k);
    sl__sha256_update(&d->sha, bytes, n);
}

static long run_place(const digest *d, long run_id)
{
    for (size_t i = 0; i < d->n_runs; i++)
        if (d->run_ids[i] == run_id)
            return (long)i;
    return -1;
}

static void put_column(digest *d, sl__stmt *st, int c, char kind)
{
    char text[40];
    if (kind == '-')
        return;
    if (sl__db_column_is_null(st, c)) {
        put(d, "N", "", 0);
    } else if (kind == 'i' || kind == 'R') {
        long long v = sl__db_column_int64(st, c);
        int n = snprintf(text, sizeof text, "%lld", kind == 'R' ? (long long)run_place(d, (long)v) : v);
        put(d, "i", text, (size_t)n);
    } else if (kind == 'r') {
        int n = snprintf(text, sizeof text, "%.17g", sl__db_column_double(st, c));
        put(d, "r", text, (size_t)n);
    } else if (kind == 't') {
        const char *t = sl__db_column_text(st, c);
        put(d, "t", t, strlen(t));
    } else {
        const void *b = sl__db_column_blob(st, c);
        put(d, "b", b ? b : "", sl__db_column_bytes(st, c));
    }
}

/* Every row of a query with ?1 bound to id, columns as kinds says. */
static sl_status hash_query(sl_store *store, digest *d, const char *sql, const char *kinds,
                            long id, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare_flags(store, &st, sql, SL__DB_STREAM, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, id);
    int rc;
    size_t rows = 0;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        for (int c = 0; kinds[c]; c++)
            put_column(d, st, c, kinds[c]);
        rows++;
    }
    if (rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the lot for its checksum");
    sl__db_finalize(st);
    char count[32];
    put(d, "#", count, (size_t)snprintf(count, sizeof count, "%zu", rows));
    return s;
}

/* ---- the rows of a lot ---- */

#define MEASUREMENT_VALUES \
    "m.source, m.source_line, m.fit_class, m.fit_model, m.cnp_V, m.cnp_sigma_V, " \
    "m.mobility_cm2_per_Vs, m.mobility_sigma_cm2_per_Vs, m.n0_per_cm2, m.n0_sigma_per_cm2, " \
    "m.r_contact_ohm, m.r_contact_sigma_ohm, m.rel_rms, m.r_squared, m.n_points, " \
    "m.electron_mobility_cm2_per_Vs, m.hole_mobility_cm2_per_Vs, m.n_spikes, m.hysteresis_V, " \
    "m.points_dropped"

#define PREDICTION_VALUES \
    "p.temperature_K, p.gate_capacitance_nF_per_cm2, p.eot_nm, p.doping_per_cm2, " \
    "p.doping_sigma_per_cm2, p.cnp_V, p.cnp_sigma_V, p.gate_min_V, p.gate_max_V, " \
    "p.max_electron_density_per_cm2, p.max_hole_density_per_cm2, p.fermi_at_gate_min_eV, " \
    "p.fermi_at_gate_max_eV, p.gate_efficiency_per_cm2_V, p.thermal_floor_per_cm2, " \
    "p.thermal_floor_V, p.disorder_crossover_K, p.cnp_in_range"

static const char revisions_sql[] =
    "SELECT id, revision, plan_hash, plan_text, plan_name, created_utc FROM plan_revision "
    "WHERE lot_id = ?1 ORDER BY revision";
static const char splits_sql[] =
    "SELECT id, split_index, name, dielectric, treatments, planned_doping_per_cm2, "
    "planned_doping_sigma_per_cm2, devices_needed, devices_available, levels FROM split "
    "WHERE revision_id = ?1 ORDER BY split_index";
static const char wafers_sql[] =
    "SELECT w.id, w.name, s.split_index, w.process_order FROM wafer w "
    "LEFT JOIN split s ON s.id = w.split_id WHERE w.revision_id = ?1 ORDER BY w.id";
static const char predictions_sql[] =
    "SELECT s.split_index, " PREDICTION_VALUES " FROM prediction p JOIN split s "
    "ON s.id = p.split_id WHERE s.revision_id = ?1 ORDER BY s.split_index, p.rowid";
static const char loads_sql[] =
    "SELECT w.name, l.step, l.load FROM wafer_load l JOIN wafer w ON w.id = l.wafer_id "
    "WHERE w.revision_id = ?1 ORDER BY w.id, l.step";
static const char runs_sql[] =
    "SELECT r.id, r.step, r.temperature_K, p.revision, r.kind, r.source_name, r.source_sha256, "
    "r.rows, r.devices, r.created_utc FROM measurement_run r JOIN plan_revision p "
    "ON p.id = r.revision_id WHERE r.lot_id = ?1 ORDER BY r.id";
static const char devices_sql[] =
    "SELECT d.id, d.wafer, d.name, d.die_x, d.die_y, d.device_type, d.channel_length_um, "
    "d.channel_width_um FROM device d WHERE d.lot_id = ?1 ORDER BY d.id";
static const char measurements_sql[] =
    "SELECT d.wafer, d.name, m.run_id, " MEASUREMENT_VALUES ", w.n_points, w.points "
    "FROM measurement m JOIN device d ON d.id = m.device_id "
    "LEFT JOIN sweep w ON w.measurement_id = m.id WHERE d.lot_id = ?1 ORDER BY m.id";

static const char revision_kinds[] = "-itttt";
static const char split_kinds[] = "-itttrrirt";
static const char wafer_kinds[] = "-tii";
static const char prediction_kinds[] = "irrrrrrrrrrrrrrrrri";
static const char load_kinds[] = "tti";
static const char run_kinds[] = "-tritttiit";
static const char device_kinds[] = "-ttiitrr";
static const char measurement_kinds[] = "ttRtittrrrrrrrrrrirririib";

/* The runs of a lot, oldest first (malloc'd ids). */
static sl_status lot_runs(sl_store *store, long **ids, size_t *n, long lot_id, sl_diag *diag)
{
    sl_store_run *runs = NULL;
    sl_status s = sl_store_list_runs(store, &runs, n, lot_id, diag);
    *ids = s == SL_OK ? calloc(*n ? *n : 1, sizeof **ids) : NULL;
    if (s == SL_OK && !*ids)
        s = SL_ENOMEM;
    for (size_t i = 0; s == SL_OK && i < *n; i++)
        (*ids)[i] = runs[i].id;
    sl_store_runs_free(runs, *n);
    return s;
}

/* Each revision's rows: the revision, then its splits, wafers,
 * predictions and wafer loads. */
static sl_status hash_revisions(sl_store *store, digest *d, long lot_id, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, revisions_sql, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    long *ids = NULL;
    size_t n = 0, cap = 0;
    int rc;
    while (s == SL_OK && (rc = sl__db_step(st)) == SL__DB_ROW) {
        for (int c = 0; revision_kinds[c]; c++)
            put_column(d, st, c, revision_kinds[c]);
        if (n == cap) {
            cap = cap ? 2 * cap : 8;
            long *grown = realloc(ids, cap * sizeof *ids);
            if (!grown)
                s = SL_ENOMEM;
            else
                ids = grown;
        }
        if (s == SL_OK)
            ids[n++] = (long)sl__db_column_int64(st, 0);
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the lot for its checksum");
    sl__db_finalize(st);
    for (size_t i = 0; s == SL_OK && i < n; i++) {
        s = hash_query(store, d, splits_sql, split_kinds, ids[i], diag);
        if (s == SL_OK)
            s = hash_query(store, d, wafers_sql, wafer_kinds, ids[i], diag);
        if (s == SL_OK)
            s = hash_query(store, d, predictions_sql, prediction_kinds, ids[i], diag);
        if (s == SL_OK)
            s = hash_query(store, d, loads_sql, load_kinds, ids[i], diag);
    }
    free(ids);
    return s;
}

static sl_status hash_lot(sl_store *store, digest *d, long lot_id, const char *name,
                          const char *created_utc, sl_diag *diag)
{
    put(d, "lot", name, strlen(name));
    put(d, "t", created_utc, strlen(created_utc));
    free(d->run_ids);
    d->run_ids = NULL;
    sl_status s = lot_runs(store, &d->run_ids, &d->n_runs, lot_id, diag);
    if (s == SL_OK)
        s = hash_revisions(store, d, lot_id, diag);
    if (s == SL_OK)
        s = hash_query(store, d, runs_sql, run_kinds, lot_id, diag);
    if (s == SL_OK)
        s = hash_query(store, d, devices_sql, device_kinds, lot_id, diag);
    if (s == SL_OK)
        s = hash_query(store, d, measurements_sql, measurement_kinds, lot_id, diag);
    return s;
}

sl_status sl_store_checksum(sl_store *store, char hex[65], const char *lot, sl_diag *diag)
{
    digest d = { 0 };
    sl__sha256_init(&d.sha);
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, lot
        ? "SELECT id, name, created_utc FROM lot WHERE name = ?1"
        : "SELECT id, name, created_utc FROM lot ORDER BY name", diag);
    if (s != SL_OK)
        return s;
    if (lot)
        sl__db_bind_text(st, 1, lot, -1);
    /* lots few: read them all before the per-lot queries */
    sl_store_lot *lots = NULL;
    size_t n = 0, cap = 0;
    int rc;
    while (s == SL_OK && (rc = sl__db_step(st)) == SL__DB_ROW) {
        if (n == cap) {
            cap = cap ? 2 * cap : 8;
            sl_store_lot *grown = realloc(lots, cap * sizeof *lots);
            if (!grown) {
                s = SL_ENOMEM;
                break;
            }
            lots = grown;
        }
        memset(&lots[n], 0, sizeof lots[n]);
        lots[n].lot_id = (long)sl__db_column_int64(st, 0);
        lots[n].lot = sl__store_column_strdup(st, 1);
        lots[n].created_utc = sl__store_column_strdup(st, 2);
        n++;
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "list the lots");
    sl__db_finalize(st);
    if (s == SL_OK && lot && n == 0) {
        sl_diag_error(diag, "lot '%s' is not in %s", lot, store->path);
        s = SL_ENOTFOUND;
    }
    for (size_t i = 0; s == SL_OK && i < n; i++)
        s = hash_lot(store, &d, lots[i].lot_id, lots[i].lot, lots[i].created_utc, diag);
    for (size_t i = 0; i < n; i++)
        sl_store_lot_clear(&lots[i]);
    free(lots);
    free(d.run_ids);
    unsigned char digest_bytes[32];
    sl__sha256_final(&d.sha, digest_bytes);
    sl__sha256_hex(digest_bytes, hex);
    return s;
}

/* ---- copying a lot ---- */

/* Old row id to new, in the order rows were copied (old ids ascending). */
typedef struct {
    long *from, *to;
    size_t n, cap;
} id_map;

static int map_add(id_map *m, long from, long to)
{
    if (m->n == m->cap) {
        size_t cap = m->cap ? 2 * m->cap : 64;
        long *f = realloc(m->from, cap * sizeof *f);
        if (f)
            m->from = f;
        long *t = f ? realloc(m->to, cap * sizeof *t) : NULL;
        if (t)
            m->to = t;
        if (!f || !t)
            return 0;
        m->cap = cap;
    }
    m->from[m->n] = from;
    m->to[m->n++] = to;
    return 1;
}

static long map_get(const id_map *m, long from)
{
    size_t lo = 0, hi = m->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (m->from[mid] < from)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < m->n && m->from[lo] == from ? m->to[lo] : -1;
}

static void map_free(id_map *m)
{
    free(m->from);
    free(m->to);
    memset(m, 0, sizeof *m);
}

typedef struct {
    sl_store *dst, *src;
    long src_lot, dst_lot;
    id_map revisions, splits, wafers, runs, devices;
    sl_diag *diag;
} copy_ctx;

/* Map kinds of copy columns: 'L' the new lot, 'V' a revision, 'S' a split,
 * 'W' a wafer, 'R' a run, 'D' a device. */
static id_map *map_of(copy_ctx *c, char kind)
{
    switch (kind) {
    case 'V': return &c->revisions;
    case 'S': return &c->splits;
    case 'W': return &c->wafers;
    case 'R': return &c->runs;
    case 'D': return &c->devices;
    default: return NULL;
    }
}

/* Bind column col of a source row to the insert as its kind says. */
static void bind_copied(copy_ctx *c, sl__stmt *ins, int index, sl__stmt *row, int col, char kind)
{
    if (kind == 'L') {
        sl__db_bind_int64(ins, index, c->dst_lot);
    } else if (sl__db_column_is_null(row, col)) {
        sl__db_bind_null(ins, index);
    } else if (map_of(c, kind)) {
        sl__db_bind_int64(ins, index, map_get(map_of(c, kind), (long)sl__db_column_int64(row, col)));
    } else if (kind == 'i') {
        sl__db_bind_int64(ins, index, sl__db_column_int64(row, col));
    } else if (kind == 'r') {
        sl__db_bind_double(ins, index, sl__db_column_double(row, col));
    } else if (kind == 't') {
        sl__db_bind_text(ins, index, sl__db_column_text(row, col), -1);
    } else {
        const void *b = sl__db_column_blob(row, col);
        sl__db_bind_blob(ins, index, b ? b : "", sl__db_column_bytes(row, col));
    }
}

/* Copy the rows of a source query (?1 bound to id; column 0 its row id
 * when ids is given) into an insert of columns 1.. with their kinds; the
 * new ids (RETURNING id) recorded in ids. */
static sl_status copy_rows(copy_ctx *c, const char *select_sql, long id, const char *insert_sql,
                           const char *kinds, id_map *ids)
{
    sl__stmt *row = NULL, *ins = NULL;
    sl_status s = sl__store_prepare_flags(c->src, &row, select_sql, SL__DB_STREAM, c->diag);
    if (s == SL_OK)
        s = sl__store_prepare(c->dst, &ins, insert_sql, c->diag);
    if (s == SL_OK)
        sl__db_bind_int64(row, 1, id);
    int rc = SL__DB_DONE;
    while (s == SL_OK && (rc = sl__db_step(row)) == SL__DB_ROW) {
        for (int k = 1; kinds[k]; k++)
            bind_copied(c, ins, k, row, k, kinds[k]);
        if (ids) {
            long new_id = 0;
            s = sl__store_step_id(c->dst, ins, &new_id, c->diag, "copy a row");
            if (s == SL_OK && !map_add(ids, (long)sl__db_column_int64(row, 0), new_id))
                s = SL_ENOMEM;
        } else {
            s = sl__store_step_done(c->dst, ins, c->diag, "copy a row");
        }
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(c->src, c->diag, "read the lot to copy");
    sl__db_finalize(row);
    sl__db_finalize(ins);
    return s;
}

static sl_status copy_revision_rows(copy_ctx *c, long src_revision)
{
    sl_status s = copy_rows(c,
        "SELECT id, revision_id, split_index, name, dielectric, treatments, planned_doping_per_cm2, "
        "planned_doping_sigma_per_cm2, devices_needed, devices_available, levels FROM split "
        "WHERE revision_id = ?1 ORDER BY id", src_revision,
        "INSERT INTO split (revision_id, split_index, name, dielectric, treatments, "
        "planned_doping_per_cm2, planned_doping_sigma_per_cm2, devices_needed, devices_available, "
        "levels) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10) RETURNING id",
        "-Vitttrrirt", &c->splits);
    if (s == SL_OK)
        s = copy_rows(c, "SELECT id, revision_id, name, split_id, process_order FROM wafer "
                         "WHERE revision_id = ?1 ORDER BY id", src_revision,
                      "INSERT INTO wafer (revision_id, name, split_id, process_order) "
                      "VALUES (?1, ?2, ?3, ?4) RETURNING id", "-VtSi", &c->wafers);
    if (s == SL_OK)
        s = copy_rows(c, "SELECT 0, p.split_id, " PREDICTION_VALUES " FROM prediction p JOIN split s "
                         "ON s.id = p.split_id WHERE s.revision_id = ?1 ORDER BY p.rowid", src_revision,
                      "INSERT INTO prediction VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, "
                      "?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19)",
                      "-Srrrrrrrrrrrrrrrrri", NULL);
    if (s == SL_OK)
        s = copy_rows(c, "SELECT 0, l.wafer_id, l.step, l.load FROM wafer_load l JOIN wafer w "
                         "ON w.id = l.wafer_id WHERE w.revision_id = ?1 ORDER BY l.wafer_id, l.step",
                      src_revision, "INSERT INTO wafer_load (wafer_id, step, load) VALUES (?1, ?2, ?3)",
                      "-Wti", NULL);
    return s;
}

static sl_status copy_lot_rows(copy_ctx *c)
{
    sl_status s = copy_rows(c, "SELECT id, lot_id, revision, plan_hash, plan_text, plan_name, "
                               "created_utc FROM plan_revision WHERE lot_id = ?1 ORDER BY id",
                            c->src_lot,
                            "INSERT INTO plan_revision (lot_id, revision, plan_hash, plan_text, "
                            "plan_name, created_utc) VALUES (?1, ?2, ?3, ?4, ?5, ?6) RETURNING id",
                            "-Littttt", &c->revisions);
    for (size_t i = 0; s == SL_OK && i < c->revisions.n; i++)
        s = copy_revision_rows(c, c->revisions.from[i]);
    if (s == SL_OK)
        s = copy_rows(c, "SELECT id, lot_id, step, temperature_K, revision_id, kind, source_name, "
                         "source_sha256, rows, devices, created_utc FROM measurement_run "
                         "WHERE lot_id = ?1 ORDER BY id", c->src_lot,
                      "INSERT INTO measurement_run (lot_id, step, temperature_K, revision_id, kind, "
                      "source_name, source_sha256, rows, devices, created_utc) VALUES (?1, ?2, ?3, "
                      "?4, ?5, ?6, ?7, ?8, ?9, ?10) RETURNING id", "-LtrVtttiit", &c->runs);
    if (s == SL_OK)
        s = copy_rows(c, "SELECT id, lot_id, wafer, name, die_x, die_y, device_type, "
                         "channel_length_um, channel_width_um FROM device WHERE lot_id = ?1 "
                         "ORDER BY id", c->src_lot,
                      "INSERT INTO device (lot_id, wafer, name, die_x, die_y, device_type, "
                      "channel_length_um, channel_width_um) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8) "
                      "RETURNING id", "-Lttiitrr", &c->devices);
    return s;
}

/* Measurements in their order, each with its sweep. */
static sl_status copy_measurements(copy_ctx *c)
{
    id_map measurements = { 0 };
    sl_status s = copy_rows(c,
        "SELECT m.id, m.device_id, m.run_id, " MEASUREMENT_VALUES " FROM measurement m "
        "JOIN device d ON d.id = m.device_id WHERE d.lot_id = ?1 ORDER BY m.id", c->src_lot,
        "INSERT INTO measurement (device_id, run_id, source, source_line, fit_class, fit_model, "
        "cnp_V, cnp_sigma_V, mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs, n0_per_cm2, "
        "n0_sigma_per_cm2, r_contact_ohm, r_contact_sigma_ohm, rel_rms, r_squared, n_points, "
        "electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs, n_spikes, hysteresis_V, "
        "points_dropped) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, "
        "?15, ?16, ?17, ?18, ?19, ?20, ?21, ?22) RETURNING id",
        "-DRtittrrrrrrrrrrirriri", &measurements);
    if (s == SL_OK) {
        /* sweeps keyed by the new measurement ids: a map of their own */
        id_map saved = c->devices;
        c->devices = measurements;
        s = copy_rows(c, "SELECT 0, w.measurement_id, w.n_points, w.points FROM sweep w "
                         "JOIN measurement m ON m.id = w.measurement_id JOIN device d "
                         "ON d.id = m.device_id WHERE d.lot_id = ?1 ORDER BY w.measurement_id",
                      c->src_lot, "INSERT INTO sweep (measurement_id, n_points, points) "
                                  "VALUES (?1, ?2, ?3)", "-Dib", NULL);
        c->devices = saved;
    }
    map_free(&measurements);
    return s;
}

/* The source lot's id and creation time; SL_ENOTFOUND naming it. */
static sl_status source_lot(copy_ctx *c, const char *lot, char created[64])
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(c->src, &st, "SELECT id, created_utc FROM lot WHERE name = ?1",
                                   c->diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_text(st, 1, lot, -1);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        c->src_lot = (long)sl__db_column_int64(st, 0);
        snprintf(created, 64, "%s", sl__db_column_text(st, 1));
    }
    sl__db_finalize(st);
    if (rc == SL__DB_ROW)
        return SL_OK;
    if (rc != SL__DB_DONE)
        return sl__store_db_error(c->src, c->diag, "look up the lot");
    sl_diag_error(c->diag, "lot '%s' is not in %s", lot, c->src->path);
    return SL_ENOTFOUND;
}

/* The lot's row in the destination: refused when it has the lot already. */
static sl_status destination_lot(copy_ctx *c, const char *lot, const char *created)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(c->dst, &st,
        "INSERT INTO lot (name, created_utc) VALUES (?1, ?2) ON CONFLICT DO NOTHING RETURNING id",
        c->diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_text(st, 1, lot, -1);
    sl__db_bind_text(st, 2, created, -1);
    int rc = sl__db_step(st);
    c->dst_lot = rc == SL__DB_ROW ? (long)sl__db_column_int64(st, 0) : 0;
    sl__db_finalize(st);
    if (rc == SL__DB_DONE) {
        sl_diag_error(c->diag, "lot '%s' is in %s already; nothing was copied", lot, c->dst->path);
        return SL_EINPUT;
    }
    if (rc != SL__DB_ROW)
        return sl__store_db_error(c->dst, c->diag, "copy the lot");
    return sl__store_lock_lot(c->dst, c->dst_lot, c->diag);
}

sl_status sl_store_copy_lot(sl_store *dst, sl_store *src, const char *lot, sl_diag *diag)
{
    copy_ctx c = { .dst = dst, .src = src, .diag = diag };
    char created[64] = "";
    sl_status s = source_lot(&c, lot, created);
    if (s == SL_OK)
        s = destination_lot(&c, lot, created);
    if (s == SL_OK)
        s = copy_lot_rows(&c);
    if (s == SL_OK)
        s = copy_measurements(&c);
    map_free(&c.revisions);
    map_free(&c.splits);
    map_free(&c.wafers);
    map_free(&c.runs);
    map_free(&c.devices);
    return s;
}

sl_status sl_store_begin_read(sl_store *store, sl_diag *diag)
{
    return sl__store_exec(store, sl__store_is_pg(store) ? "BEGIN ISOLATION LEVEL REPEATABLE READ"
                                                      : "BEGIN",
                         diag, "start reading the database");
}
