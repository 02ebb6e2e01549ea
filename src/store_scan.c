/* SPDX-License-Identifier: MIT
 * The scratch space of an analysis (see include/splitlot/store.h): a lot's
 * devices copied, wafer by wafer in report order, into a temporary table that
 * SQLite keeps in a file, read back in passes, and a second one that lists
 * devices by severity. Memory does not grow with the lot. Not for writes to
 * the lot: the scratch reads one snapshot of the database.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

/* Page cache while a scratch is open (KiB, per database): the passes read
 * each page once, so a larger cache would only grow with the lot. */
#define SL_SCRATCH_CACHE_KIB 256

struct sl_store_scratch {
    sl_store *store;
    int in_savepoint;
    int cache_set;
    long main_cache, temp_cache; /* cache_size before, restored at the end */
    sqlite3_stmt *keep;          /* a wafer's devices into the kept table */
    sqlite3_stmt *kept, *values; /* kept devices read back: whole, or V_cnp only */
    sqlite3_stmt *rank, *ranked; /* ranked devices: insert, read back */
    long last_kept;              /* rowid of the kept device last read */
    double temperature_K;        /* the view's */
    sl_store_device_row row;
};

/* The tables stay with the connection, emptied after each use, so that a
 * history of many lots does not change the schema (and make SQLite read it
 * again) for each. Ranked devices are read in the order of their index, so
 * no sort is held. */
static const char scratch_tables_sql[] =
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_run (id INTEGER PRIMARY KEY);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_kept (grp INTEGER NOT NULL, "
    "tag INTEGER NOT NULL, measurement_id INTEGER NOT NULL, device_id INTEGER NOT NULL, "
    "run_id INTEGER NOT NULL, wafer TEXT NOT NULL, device TEXT NOT NULL, "
    "fit_class TEXT NOT NULL, fit_model TEXT, cnp_V REAL, die_x INTEGER NOT NULL, "
    "die_y INTEGER NOT NULL, mobility_cm2_per_Vs REAL, n0_per_cm2 REAL, r_contact_ohm REAL, "
    "hysteresis_V REAL, channel_length_um REAL, channel_width_um REAL, "
    "measurements INTEGER NOT NULL, n_points INTEGER NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_value (grp INTEGER NOT NULL, "
    "cnp_V REAL NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_rank (severity REAL NOT NULL, "
    "wafer TEXT NOT NULL, device TEXT NOT NULL, kept_id INTEGER NOT NULL);"
    "CREATE INDEX IF NOT EXISTS temp.sl_scratch_rank_order "
    "ON sl_scratch_rank (severity DESC, wafer, device)";
static const char empty_tables_sql[] =
    "DELETE FROM temp.sl_scratch_run; DELETE FROM temp.sl_scratch_kept; "
    "DELETE FROM temp.sl_scratch_value; DELETE FROM temp.sl_scratch_rank";

static const char view_sql[] =
    "INSERT INTO temp.sl_scratch_run (id) SELECT id FROM measurement_run "
    "WHERE lot_id = ?1 AND step = ?2 AND temperature_K = ?3";

/* One wafer's devices, each with its newest measurement in the view's runs
 * (a re-probe supersedes the earlier run), sorted by die: a sort as small
 * as a wafer. The usable V_cnp go to a table of their own, which the many
 * passes of a median read faster. */
static const char keep_sql[] =
    "INSERT INTO temp.sl_scratch_kept (grp, tag, measurement_id, device_id, run_id, wafer, "
    "device, fit_class, fit_model, cnp_V, die_x, die_y, mobility_cm2_per_Vs, n0_per_cm2, "
    "r_contact_ohm, hysteresis_V, channel_length_um, channel_width_um, measurements, "
    "n_points) "
    "SELECT ?3, ?4, m.id, d.id, m.run_id, ?2, d.name, m.fit_class, m.fit_model, m.cnp_V, "
    "d.die_x, d.die_y, m.mobility_cm2_per_Vs, m.n0_per_cm2, m.r_contact_ohm, m.hysteresis_V, "
    "d.channel_length_um, d.channel_width_um, "
    "(SELECT count(*) FROM measurement c WHERE c.device_id = d.id "
    "AND c.run_id IN temp.sl_scratch_run), coalesce(m.n_points, 0) "
    "FROM device d JOIN measurement m ON m.id = (SELECT c.id FROM measurement c "
    "WHERE c.device_id = d.id AND c.run_id IN temp.sl_scratch_run ORDER BY c.run_id DESC LIMIT 1) "
    "WHERE d.lot_id = ?1 AND d.wafer = ?2 "
    "ORDER BY d.die_y, d.die_x, d.name";

#define KEPT_COLUMNS                                                                       \
    "c.grp, c.tag, c.rowid, c.measurement_id, c.device_id, c.run_id, c.wafer, c.device, " \
    "c.fit_class, coalesce(c.fit_model, ''), c.cnp_V, c.die_x, c.die_y, "                 \
    "c.mobility_cm2_per_Vs, c.n0_per_cm2, c.r_contact_ohm, c.hysteresis_V, "              \
    "c.channel_length_um, c.channel_width_um, c.measurements, c.n_points"
static const char kept_sql[] =
    "SELECT " KEPT_COLUMNS " FROM temp.sl_scratch_kept c ORDER BY c.rowid";
static const char keep_values_sql[] =
    "INSERT INTO temp.sl_scratch_value (grp, cnp_V) SELECT grp, cnp_V "
    "FROM temp.sl_scratch_kept WHERE fit_class = ?1 AND cnp_V IS NOT NULL ORDER BY rowid";
static const char values_sql[] = "SELECT grp, cnp_V FROM temp.sl_scratch_value ORDER BY rowid";
static const char rank_sql[] =
    "INSERT INTO temp.sl_scratch_rank (severity, wafer, device, kept_id) VALUES (?1, ?2, ?3, ?4)";
static const char ranked_sql[] =
    "SELECT " KEPT_COLUMNS " FROM temp.sl_scratch_rank k "
    "CROSS JOIN temp.sl_scratch_kept c ON c.rowid = k.kept_id "
    "ORDER BY k.severity DESC, k.wafer, k.device";

/* A text column into a buffer, cut to fit (names are at most 64 bytes). */
static void copy_text(char *dst, size_t size, sqlite3_stmt *st, int col)
{
    const char *t = (const char *)sqlite3_column_text(st, col);
    size_t n = t ? strnlen(t, size - 1) : 0;
    memcpy(dst, t ? t : "", n);
    dst[n] = '\0';
}

/* A kept device: its group, tag, rowid and row (the numbers not kept NaN). */
static void read_kept(sl_store_scratch *x, sqlite3_stmt *st, long *group, long *tag)
{
    sl_store_device_row *r = &x->row;
    memset(r, 0, sizeof *r);
    r->temperature_K = x->temperature_K;
    r->cnp_sigma_V = r->rel_rms = r->r_squared = NAN;
    r->electron_mobility_cm2_per_Vs = r->hole_mobility_cm2_per_Vs = NAN;
    *group = (long)sqlite3_column_int64(st, 0);
    *tag = (long)sqlite3_column_int64(st, 1);
    x->last_kept = (long)sqlite3_column_int64(st, 2);
    r->id = (long)sqlite3_column_int64(st, 3);
    r->device_id = (long)sqlite3_column_int64(st, 4);
    r->run_id = (long)sqlite3_column_int64(st, 5);
    copy_text(r->wafer, sizeof r->wafer, st, 6);
    copy_text(r->name, sizeof r->name, st, 7);
    copy_text(r->fit_class, sizeof r->fit_class, st, 8);
    copy_text(r->fit_model, sizeof r->fit_model, st, 9);
    r->cnp_V = sl_store_column_real_or_nan(st, 10);
    r->die_x = (long)sqlite3_column_int64(st, 11);
    r->die_y = (long)sqlite3_column_int64(st, 12);
    double *numbers[] = { &r->mobility_cm2_per_Vs, &r->n0_per_cm2, &r->r_contact_ohm,
                          &r->hysteresis_V, &r->channel_length_um, &r->channel_width_um };
    for (int i = 0; i < 6; i++)
        *numbers[i] = sl_store_column_real_or_nan(st, 13 + i);
    r->measurements = (long)sqlite3_column_int64(st, 19);
    r->n_points = (long)sqlite3_column_int64(st, 20);
}

static sl_status pragma_value(sl_store *store, long *value, const char *sql, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    if (sqlite3_step(st) == SQLITE_ROW)
        *value = (long)sqlite3_column_int64(st, 0);
    else
        s = sl_store_db_error(store, diag, "read a setting of the database");
    sqlite3_finalize(st);
    return s;
}

static sl_status set_cache(sl_store *store, const char *schema, long size, sl_diag *diag)
{
    char sql[64];
    snprintf(sql, sizeof sql, "PRAGMA %s.cache_size = %ld", schema, size);
    return sl_store_exec(store, sql, diag, "set the page cache size");
}

static sl_status scratch_statements(sl_store_scratch *x, sl_diag *diag)
{
    sl_store *store = x->store;
    sl_status s = sl_store_exec(store, scratch_tables_sql, diag, "create the scratch tables");
    if (s == SL_OK)
        s = sl_store_exec(store, empty_tables_sql, diag, "empty the scratch tables");
    if (s == SL_OK)
        s = sl_store_prepare(store, &x->keep, keep_sql, diag);
    if (s == SL_OK)
        s = sl_store_prepare(store, &x->kept, kept_sql, diag);
    if (s == SL_OK)
        s = sl_store_prepare(store, &x->values, values_sql, diag);
    if (s == SL_OK)
        s = sl_store_prepare(store, &x->rank, rank_sql, diag);
    if (s == SL_OK)
        s = sl_store_prepare(store, &x->ranked, ranked_sql, diag);
    return s;
}

/* Small page caches for the scratch's lifetime. */
static sl_status hold_caches(sl_store_scratch *x, sl_diag *diag)
{
    sl_status s = pragma_value(x->store, &x->main_cache, "PRAGMA main.cache_size", diag);
    if (s == SL_OK)
        s = pragma_value(x->store, &x->temp_cache, "PRAGMA temp.cache_size", diag);
    x->cache_set = s == SL_OK;
    if (s == SL_OK)
        s = set_cache(x->store, "main", -SL_SCRATCH_CACHE_KIB, diag);
    if (s == SL_OK)
        s = set_cache(x->store, "temp", -SL_SCRATCH_CACHE_KIB, diag);
    return s;
}

sl_status sl_store_scratch_open(sl_store_scratch **out, sl_store *store, sl_diag *diag)
{
    *out = NULL;
    sl_store_scratch *x = calloc(1, sizeof *x);
    if (!x)
        return SL_ENOMEM;
    x->store = store;
    sl_status s = sl_store_exec(store, "SAVEPOINT sl_scratch", diag, "start reading the lot");
    x->in_savepoint = s == SL_OK;
    if (s == SL_OK)
        s = scratch_statements(x, diag);
    if (s == SL_OK)
        s = hold_caches(x, diag);
    if (s != SL_OK) {
        sl_store_scratch_close(x);
        return s;
    }
    *out = x;
    return SL_OK;
}

sl_status sl_store_scratch_view(sl_store_scratch *x, long lot_id, const char *step,
                                double temperature_K, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_exec(x->store, "DELETE FROM temp.sl_scratch_run", diag,
                                "empty the scratch tables");
    if (s == SL_OK)
        s = sl_store_prepare(x->store, &st, view_sql, diag);
    if (s != SL_OK)
        return s;
    x->temperature_K = temperature_K;
    sqlite3_bind_int64(st, 1, lot_id);
    sqlite3_bind_text(st, 2, step, -1, SQLITE_STATIC);
    sqlite3_bind_double(st, 3, temperature_K);
    return sl_store_step_once(x->store, st, diag, "choose the view's runs");
}

sl_status sl_store_scratch_keep_wafer(sl_store_scratch *x, long lot_id, const char *wafer,
                                      long group, long tag, sl_diag *diag)
{
    sqlite3_bind_int64(x->keep, 1, lot_id);
    sqlite3_bind_text(x->keep, 2, wafer, -1, SQLITE_STATIC);
    sqlite3_bind_int64(x->keep, 3, group);
    sqlite3_bind_int64(x->keep, 4, tag);
    return sl_store_step_done(x->store, x->keep, diag, "read the lot's devices");
}

/* Step a read-back statement: 1 with a row, 0 at the end (reset, so the next
 * call starts over), -1 on an error (in diag). */
static int step_back(sl_store_scratch *x, sqlite3_stmt *st, sl_diag *diag, const char *what)
{
    int rc = sqlite3_step(st);
    if (rc == SQLITE_ROW)
        return 1;
    sqlite3_reset(st);
    if (rc == SQLITE_DONE)
        return 0;
    sl_store_db_error(x->store, diag, what);
    return -1;
}

/* The next kept device of a read-back statement into x->row. */
static sl_status next_row(sl_store_scratch *x, sqlite3_stmt *st, long *group, long *tag,
                          const sl_store_device_row **row, sl_diag *diag, const char *what)
{
    *row = NULL;
    int got = step_back(x, st, diag, what);
    if (got > 0) {
        read_kept(x, st, group, tag);
        *row = &x->row;
    }
    return got < 0 ? SL_EDB : SL_OK;
}

sl_status sl_store_scratch_next_kept(sl_store_scratch *x, long *group, long *tag,
                                     const sl_store_device_row **row, sl_diag *diag)
{
    return next_row(x, x->kept, group, tag, row, diag, "read the kept devices");
}

sl_status sl_store_scratch_keep_values(sl_store_scratch *x, const char *fit_class, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(x->store, &st, keep_values_sql, diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_text(st, 1, fit_class, -1, SQLITE_STATIC);
    return sl_store_step_once(x->store, st, diag, "keep the devices' values");
}

sl_status sl_store_scratch_next_value(sl_store_scratch *x, int *more, long *group, double *cnp_V,
                                      sl_diag *diag)
{
    int got = step_back(x, x->values, diag, "read the kept values");
    *more = got > 0;
    if (got > 0) {
        *group = (long)sqlite3_column_int64(x->values, 0);
        *cnp_V = sqlite3_column_double(x->values, 1);
    }
    return got < 0 ? SL_EDB : SL_OK;
}

sl_status sl_store_scratch_rank(sl_store_scratch *x, double severity, sl_diag *diag)
{
    sqlite3_bind_double(x->rank, 1, severity);
    sqlite3_bind_text(x->rank, 2, x->row.wafer, -1, SQLITE_STATIC);
    sqlite3_bind_text(x->rank, 3, x->row.name, -1, SQLITE_STATIC);
    sqlite3_bind_int64(x->rank, 4, x->last_kept);
    return sl_store_step_done(x->store, x->rank, diag, "list a flagged device");
}

sl_status sl_store_scratch_next_ranked(sl_store_scratch *x, long *group, long *tag,
                                       const sl_store_device_row **row, sl_diag *diag)
{
    return next_row(x, x->ranked, group, tag, row, diag, "read the flagged devices");
}

void sl_store_scratch_rewind(sl_store_scratch *x)
{
    sqlite3_reset(x->kept);
    sqlite3_reset(x->values);
    sqlite3_reset(x->ranked);
}

void sl_store_scratch_close(sl_store_scratch *x)
{
    if (!x)
        return;
    sqlite3_finalize(x->keep);
    sqlite3_finalize(x->kept);
    sqlite3_finalize(x->values);
    sqlite3_finalize(x->rank);
    sqlite3_finalize(x->ranked);
    if (x->cache_set) {
        set_cache(x->store, "main", x->main_cache, NULL);
        set_cache(x->store, "temp", x->temp_cache, NULL);
    }
    if (x->in_savepoint) { /* nothing was written but the scratch tables */
        if (sqlite3_exec(x->store->db, empty_tables_sql, NULL, NULL, NULL) != SQLITE_OK)
            sqlite3_exec(x->store->db, "ROLLBACK TO sl_scratch", NULL, NULL, NULL);
        sqlite3_exec(x->store->db, "RELEASE sl_scratch", NULL, NULL, NULL);
    }
    free(x);
}
