/* SPDX-License-Identifier: MIT
 * The store (see include/splitlot/store.h): connection set-up on either
 * backend (an SQLite file or a PostgreSQL server; the server's set-up in
 * store_pg.c), forward migrations from the compiled-in db scripts,
 * transactions, error mapping and plan revisions with their predictions.
 * Devices live in store_device.c, the packed sweeps in store_sweep.c, an
 * import's lookups in store_import.c, analysis reads in store_read.c and an
 * analysis's scratch tables in store_scan.c (docs/store.md).
 */
#include "splitlot/store.h"

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "store_internal.h"

extern const char *const sl__schema_migrations[];
extern const size_t sl__schema_migration_count;

#define SL_BUSY_TIMEOUT_MS 30000

int sl_store_schema_version(void) { return (int)sl__schema_migration_count; }

int sl_store_is_server(const char *location) { return sl__db_is_url(location); }

/* The kind of a failed constraint in words, or NULL for another error. */
static const char *constraint_kind(sl__db_errkind kind)
{
    switch (kind) {
    case SL__DBE_UNIQUE: return "a UNIQUE constraint (the row exists already)";
    case SL__DBE_PRIMARYKEY: return "a PRIMARY KEY constraint (the row exists already)";
    case SL__DBE_FOREIGNKEY:
        return "a FOREIGN KEY constraint (a row it refers to is missing, or rows refer to it)";
    case SL__DBE_CHECK: return "a CHECK constraint (a value out of its allowed range)";
    case SL__DBE_NOTNULL: return "a NOT NULL constraint (a required value is missing)";
    case SL__DBE_CONSTRAINT: return "a constraint";
    default: return NULL;
    }
}

/* Failures only a server has, in words that say what to do about them. */
static int describe_server_error(char *buf, size_t size, sl_store *store, sl__db_errkind kind,
                                 const char *what)
{
    const char *msg = sl__db_errmsg(store->db);
    if (kind == SL__DBE_CONNECTION)
        snprintf(buf, size, "cannot %s: the database server cannot be reached or closed the "
                            "connection (%s); nothing was changed", what, msg);
    else if (kind == SL__DBE_AUTH)
        snprintf(buf, size, "cannot %s: the database server refused the login (%s); check the "
                            "user in the URL and the password in ~/.pgpass or PGPASSWORD", what, msg);
    else if (kind == SL__DBE_NODB)
        snprintf(buf, size, "cannot %s: the server has no such database (%s); create it "
                            "(createdb NAME) or correct the database name in the URL", what, msg);
    else if (kind == SL__DBE_TIMEOUT)
        snprintf(buf, size, "cannot %s: a statement ran past the server's statement_timeout "
                            "(%s); nothing was changed", what, msg);
    else if (kind == SL__DBE_SERIALIZE)
        snprintf(buf, size, "cannot %s: another client changed the same rows at the same time "
                            "(%s); nothing was changed, run the command again", what, msg);
    else
        return 0;
    return 1;
}

/* Why the last statement failed, in words that say what to do about it. */
static void describe_db_error(char *buf, size_t size, sl_store *store, const char *what)
{
    sl__db_errkind kind = sl__db_errkind_of(store->db);
    int sys = sl__db_syserr(store->db);
    const char *msg = sl__db_errmsg(store->db);
    const char *constraint = constraint_kind(kind);
    if (constraint)
        snprintf(buf, size, "cannot %s: %s failed (%s); nothing was changed", what, constraint, msg);
    else if (describe_server_error(buf, size, store, kind, what))
        return;
    else if (kind == SL__DBE_READONLY)
        snprintf(buf, size, "database is read-only (the file, its folder or the file system); "
                            "cannot %s; nothing was changed", what);
    else if (kind == SL__DBE_FULL)
        snprintf(buf, size, "disk full while trying to %s; nothing was changed", what);
    else if (kind == SL__DBE_IOERR)
        snprintf(buf, size, "disk I/O error while trying to %s (%s); nothing was changed", what,
                 sys ? strerror(sys) : "a failing disk, a full one or a file size limit");
    else if (kind == SL__DBE_CANTOPEN)
        snprintf(buf, size, "cannot %s: the database files cannot be opened (%s); a read-only "
                            "folder or file system also stops SQLite from creating the -wal and "
                            "-shm files beside the database", what, sys ? strerror(sys) : msg);
    else if (kind == SL__DBE_NOTADB)
        snprintf(buf, size, "cannot %s: the file is not a splitlot database or is damaged (%s)",
                 what, msg);
    else if (kind == SL__DBE_BUSY)
        snprintf(buf, size, "database is busy (another splitlot is writing); cannot %s", what);
    else
        snprintf(buf, size, "cannot %s: %s", what, msg);
}

sl_status sl__store_db_error(sl_store *store, sl_diag *diag, const char *what)
{
    char text[768], own[256];
    if (sl__store_bulk_error(store, own, sizeof own)) {
        what = "store the imported devices";
        if (own[0]) {
            sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0, "cannot %s: %s; nothing was changed",
                        what, own);
            return SL_EDB;
        }
    }
    describe_db_error(text, sizeof text, store, what);
    sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0, "%s", text);
    return SL_EDB;
}

sl_status sl__store_exec(sl_store *store, const char *sql, sl_diag *diag, const char *what)
{
    if (sl__db_exec(store->db, sql) != SL__DB_OK)
        return sl__store_db_error(store, diag, what);
    return SL_OK;
}

sl_status sl__store_prepare(sl_store *store, sl__stmt **stmt, const char *sql, sl_diag *diag)
{
    return sl__store_prepare_flags(store, stmt, sql, 0, diag);
}

sl_status sl__store_prepare_flags(sl_store *store, sl__stmt **stmt, const char *sql, int flags,
                                 sl_diag *diag)
{
    if (sl__db_prepare(store->db, sql, flags, stmt) != SL__DB_OK)
        return sl__store_db_error(store, diag, "prepare a query");
    return SL_OK;
}

int sl__store_is_pg(const sl_store *store) { return sl__db_kind_of(store->db) == SL__DB_PG; }

/* The time records are stamped with: now, or SOURCE_DATE_EPOCH (seconds
 * since 1970, the reproducible-builds convention) when it is set, so that
 * a test or a reproducible demo gets the same database twice. */
void sl__store_now_utc(char out[32])
{
    time_t now = time(NULL);
    const char *fixed = getenv("SOURCE_DATE_EPOCH");
    if (fixed && *fixed) {
        char *end = NULL;
        long long v = strtoll(fixed, &end, 10);
        if (*end == '\0' && v >= 0)
            now = (time_t)v;
    }
    struct tm tm;
    gmtime_r(&now, &tm);
    strftime(out, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
}

static int read_user_version(sl_store *store)
{
    sl__stmt *st = NULL;
    int v = -1;
    if (sl__db_prepare(store->db, "PRAGMA user_version", 0, &st) == SL__DB_OK &&
        sl__db_step(st) == SL__DB_ROW)
        v = (int)sl__db_column_int64(st, 0);
    sl__db_finalize(st);
    return v;
}

static sl_status apply_migration(sl_store *store, size_t index, sl_diag *diag)
{
    char pragma[64];
    snprintf(pragma, sizeof pragma, "PRAGMA user_version = %zu", index + 1);
    sl_status st = sl__store_exec(store, "BEGIN IMMEDIATE", diag, "start a schema migration");
    if (st == SL_OK)
        st = sl__store_exec(store, sl__schema_migrations[index], diag, "migrate the schema");
    if (st == SL_OK)
        st = sl__store_exec(store, pragma, diag, "record the schema version");
    if (st == SL_OK)
        st = sl__store_exec(store, "COMMIT", diag, "commit a schema migration");
    if (st != SL_OK)
        sl__db_exec(store->db, "ROLLBACK");
    return st;
}

sl_status sl__store_refuse_newer(sl_store *store, int version, sl_diag *diag)
{
    sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0,
                "database schema version %d is newer than this splitlot (%zu); upgrade splitlot",
                version, sl__schema_migration_count);
    return SL_EDB;
}

static sl_status migrate(sl_store *store, sl_diag *diag)
{
    int v = read_user_version(store);
    if (v < 0)
        return sl__store_db_error(store, diag, "read the schema version");
    if ((size_t)v > sl__schema_migration_count)
        return sl__store_refuse_newer(store, v, diag);
    for (size_t i = (size_t)v; i < sl__schema_migration_count; i++) {
        sl_status st = apply_migration(store, i, diag);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

static sl_status configure(sl_store *store, sl_diag *diag)
{
    sl__db_sqlite_busy_timeout(store->db, SL_BUSY_TIMEOUT_MS);
    sl_status st = sl__store_exec(store, "PRAGMA foreign_keys = ON", diag, "enable foreign keys");
    /* Every command streams through its rows (an import appends, the
     * analyses scan a lot once or twice): 1 MiB of page cache holds the
     * indexes' working pages, and the process stays the same size for a lot
     * of a thousand devices or of a million. */
    if (st == SL_OK)
        st = sl__store_exec(store, "PRAGMA cache_size = -1024", diag, "set the page cache size");
    /* temporary tables (an import's staged runs, an analysis's scratch) in a
     * file whatever SQLite's build default, so they do not grow the process */
    if (st == SL_OK)
        st = sl__store_exec(store, "PRAGMA temp_store = FILE", diag, "keep temporary tables in a file");
    if (st != SL_OK)
        return st;
    /* WAL needs a write the first time only; a read-only file keeps its mode.
     * A new database gets 16 KiB pages first (a database that exists keeps
     * its own): a lot's rows and sweeps go out in a quarter of the writes,
     * and an import's closing checkpoint takes 15 ms instead of 50. */
    if (!sl__db_readonly(store->db)) {
        st = sl__store_exec(store, "PRAGMA page_size = 16384", diag, "set the page size");
        if (st == SL_OK)
            st = sl__store_exec(store, "PRAGMA journal_mode = WAL", diag, "switch to WAL");
        if (st == SL_OK)
            st = sl__store_exec(store, "PRAGMA synchronous = FULL", diag, "set synchronous");
    }
    return st;
}

sl_status sl_store_open(sl_store **out, const char *path, sl_diag *diag)
{
    *out = NULL;
    sl_store *store = calloc(1, sizeof *store);
    if (!store)
        return SL_ENOMEM;
    store->path = sl__db_display_name(path);
    if (!store->path) {
        free(store);
        return SL_ENOMEM;
    }
    int rc = sl__db_open(&store->db, path);
    sl_status st = SL_OK;
    if (rc != SL__DB_OK) {
        if (store->db && sl__db_kind_of(store->db) == SL__DB_PG)
            sl__store_db_error(store, diag, "connect to the database");
        else
            sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0, "cannot open database: %s",
                        store->db ? sl__db_errmsg(store->db) : "out of memory");
        st = SL_EDB;
    } else if (sl__store_is_pg(store)) {
        st = sl__store_pg_setup(store, diag);
    } else {
        st = configure(store, diag);
        if (st == SL_OK)
            st = migrate(store, diag);
    }
    if (st != SL_OK) {
        sl_store_close(store);
        return st;
    }
    *out = store;
    return SL_OK;
}

void sl_store_close(sl_store *store)
{
    if (!store)
        return;
    sl__store_bulk_discard(store);
    sl__db_finalize(store->insert_device);
    sl__db_finalize(store->find_device);
    sl__db_finalize(store->insert_measurement);
    sl__db_finalize(store->insert_sweep);
    sl__sweep_memo_clear(&store->vg_memo);
    sl__db_finalize(store->stage_point);
    sl__db_close(store->db);
    free(store->tx_runs);
    free(store->path);
    free(store);
}

sl_status sl_store_begin(sl_store *store, sl_diag *diag)
{
    store->n_tx_runs = 0;
    sl__store_bulk_discard(store);
    return sl__store_exec(store, sl__store_is_pg(store) ? "BEGIN" : "BEGIN IMMEDIATE", diag,
                         "start a transaction");
}

sl_status sl_store_commit(sl_store *store, sl_diag *diag)
{
    /* (an import's staged rows go in first: the COMMIT settles them) */
    sl_status st = sl__store_exec(store, "COMMIT", diag, "commit");
    if (st != SL_OK)
        sl_store_rollback(store);
    sl__store_bulk_discard(store);
    return st;
}

void sl_store_rollback(sl_store *store)
{
    sl__store_bulk_discard(store); /* an open COPY cancelled, not stored */
    if (sl__db_in_transaction(store->db))
        sl__db_exec(store->db, "ROLLBACK");
    /* a stage table created in the transaction is gone with it */
    sl__db_finalize(store->stage_point);
    store->stage_point = NULL;
    store->has_stage = 0;
}

/* ---- binding helpers ---- */

void sl__store_bind_real_or_null(sl__stmt *st, int index, double v)
{
    if (isfinite(v))
        sl__db_bind_double(st, index, v);
    else
        sl__db_bind_null(st, index);
}

double sl__store_column_real_or_nan(sl__stmt *st, int col)
{
    return sl__db_column_is_null(st, col) ? NAN : sl__db_column_double(st, col);
}

/* Run a prepared statement to completion (no rows expected) and reset it. */
sl_status sl__store_step_done(sl_store *store, sl__stmt *st, sl_diag *diag, const char *what)
{
    int rc = sl__db_step(st);
    sl__db_reset(st);
    if (rc != SL__DB_DONE)
        return sl__store_db_error(store, diag, what);
    return SL_OK;
}

sl_status sl__store_step_id(sl_store *store, sl__stmt *st, long *id, sl_diag *diag,
                           const char *what)
{
    int rc = sl__db_step(st);
    *id = rc == SL__DB_ROW ? (long)sl__db_column_int64(st, 0) : 0;
    sl__db_reset(st);
    return rc == SL__DB_ROW ? SL_OK : sl__store_db_error(store, diag, what);
}

sl_status sl__store_step_once(sl_store *store, sl__stmt *st, sl_diag *diag, const char *what)
{
    sl_status s = sl__store_step_done(store, st, diag, what);
    sl__db_finalize(st);
    return s;
}

/* ---- lots and plan revisions ---- */

static sl_status lot_id_of(sl_store *store, long *lot_id, const char *lot, int create, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, "SELECT id FROM lot WHERE name = ?1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_text(st, 1, lot, -1);
    int rc = sl__db_step(st);
    *lot_id = rc == SL__DB_ROW ? (long)sl__db_column_int64(st, 0) : 0;
    sl__db_finalize(st);
    if (rc == SL__DB_ROW)
        return SL_OK;
    if (rc != SL__DB_DONE)
        return sl__store_db_error(store, diag, "look up the lot");
    if (!create)
        return SL_ENOTFOUND;
    char now[32];
    sl__store_now_utc(now);
    s = sl__store_prepare(store, &st, "INSERT INTO lot (name, created_utc) VALUES (?1, ?2) RETURNING id", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_text(st, 1, lot, -1);
    sl__db_bind_text(st, 2, now, -1);
    s = sl__store_step_id(store, st, lot_id, diag, "add the lot");
    sl__db_finalize(st);
    return s;
}

/* Newest revision number and hash of a lot (0 and "" when none). */
static sl_status newest_revision(sl_store *store, int *revision, char hash[17], long lot_id,
                                 sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT revision, plan_hash FROM plan_revision WHERE lot_id = ?1 "
        "ORDER BY revision DESC LIMIT 1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    *revision = 0;
    hash[0] = '\0';
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        *revision = sl__db_column_int64(st, 0);
        snprintf(hash, 17, "%s", (const char *)sl__db_column_text(st, 1));
    }
    sl__db_finalize(st);
    return (rc == SL__DB_ROW || rc == SL__DB_DONE) ? SL_OK
                                                  : sl__store_db_error(store, diag, "read revisions");
}

static sl_status insert_revision(sl_store *store, long *revision_id, long lot_id, int revision,
                                 const char *hash, const sl_plan *plan, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO plan_revision (lot_id, revision, plan_hash, plan_text, plan_name, created_utc) "
        "VALUES (?1, ?2, ?3, ?4, ?5, ?6) RETURNING id", diag);
    if (s != SL_OK)
        return s;
    char now[32];
    sl__store_now_utc(now);
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_int64(st, 2, revision);
    sl__db_bind_text(st, 3, hash, -1);
    sl__db_bind_text(st, 4, plan->text, (int)plan->text_len);
    sl__db_bind_text(st, 5, plan->path ? plan->path : "", -1);
    sl__db_bind_text(st, 6, now, -1);
    s = sl__store_step_id(store, st, revision_id, diag, "store the plan revision");
    sl__db_finalize(st);
    return s;
}

/* A plan text stored before under an older revision (the plan was changed
 * and then changed back) becomes the newest again under the next number:
 * plan_hash is unique per lot, and its splits, wafers and predictions are
 * already there. *revived is 1 when such a revision existed. */
static sl_status revive_revision(sl_store *store, int *revived, long lot_id, int revision,
                                 const char *hash, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "UPDATE plan_revision SET revision = ?1, created_utc = ?2 "
        "WHERE lot_id = ?3 AND plan_hash = ?4", diag);
    if (s != SL_OK)
        return s;
    char now[32];
    sl__store_now_utc(now);
    sl__db_bind_int64(st, 1, revision);
    sl__db_bind_text(st, 2, now, -1);
    sl__db_bind_int64(st, 3, lot_id);
    sl__db_bind_text(st, 4, hash, -1);
    s = sl__store_step_once(store, st, diag, "store the plan revision");
    *revived = s == SL_OK && sl__db_changes(store->db) == 1;
    return s;
}

/* Treatment names of a split joined with ';' into buf. */
static void join_treatments(char *buf, size_t size, const sl_plan *plan, const sl_plan_split *s)
{
    size_t k = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < s->n_treatments && k < size; i++)
        k += (size_t)snprintf(buf + k, size - k, "%s%s", i ? ";" : "",
                              plan->treatments[s->treatments[i]].name);
}

/* Factor level names of a split joined with ';' into buf, in factor order. */
static void join_levels(char *buf, size_t size, const sl_plan *plan, const sl_plan_split *s)
{
    size_t k = 0;
    buf[0] = '\0';
    for (size_t f = 0; f < plan->n_factors && k < size; f++)
        k += (size_t)snprintf(buf + k, size - k, "%s%s", f ? ";" : "",
                              plan->factors[f].levels[s->levels[f]]);
}

static sl_status insert_splits(sl_store *store, long *split_ids, long revision_id,
                               const sl_plan *plan, const sl_layout *layout, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO split (revision_id, split_index, name, dielectric, treatments, "
        "planned_doping_per_cm2, planned_doping_sigma_per_cm2, devices_needed, devices_available, "
        "levels) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10) RETURNING id", diag);
    for (size_t i = 0; s == SL_OK && i < plan->n_splits; i++) {
        const sl_plan_split *sp = &plan->splits[i];
        char treatments[4096], levels[4096];
        join_treatments(treatments, sizeof treatments, plan, sp);
        join_levels(levels, sizeof levels, plan, sp);
        sl__db_bind_text(st, 10, levels, -1);
        sl_est doping = sl_plan_split_doping_per_cm2(plan, i);
        sl__db_bind_int64(st, 1, revision_id);
        sl__db_bind_int64(st, 2, (long long)i);
        sl__db_bind_text(st, 3, sp->name, -1);
        sl__db_bind_text(st, 4, plan->dielectrics[sp->dielectric].name, -1);
        sl__db_bind_text(st, 5, treatments, -1);
        sl__db_bind_double(st, 6, doping.val);
        sl__db_bind_double(st, 7, doping.sigma);
        /* devices_needed: no longer computed (the layout's power per level
         * replaces the device count), kept as 0 until a migration drops it */
        sl__db_bind_int64(st, 8, 0);
        sl__db_bind_double(st, 9, layout->splits[i].devices_available);
        s = sl__store_step_id(store, st, &split_ids[i], diag, "store a split");
    }
    sl__db_finalize(st);
    return s;
}

static sl_status insert_wafers(sl_store *store, const long *split_ids, long revision_id,
                               const sl_layout *layout, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO wafer (revision_id, name, split_id, process_order) VALUES (?1, ?2, ?3, ?4)",
        diag);
    for (size_t i = 0; s == SL_OK && i < layout->n_wafers; i++) {
        const sl_layout_wafer *w = &layout->wafers[i];
        sl__db_bind_int64(st, 1, revision_id);
        sl__db_bind_text(st, 2, w->wafer, -1);
        if (w->split >= 0) {
            sl__db_bind_int64(st, 3, split_ids[w->split]);
            sl__db_bind_int64(st, 4, (long long)w->process_order);
        } else {
            sl__db_bind_null(st, 3);
            sl__db_bind_null(st, 4);
        }
        s = sl__store_step_done(store, st, diag, "store a wafer");
    }
    sl__db_finalize(st);
    return s;
}

/* The load of each wafer in each batched step (table wafer_load). */
static sl_status insert_wafer_loads(sl_store *store, long revision_id, const sl_plan *plan,
                                    const sl_layout *layout, sl_diag *diag)
{
    if (plan->n_batches == 0)
        return SL_OK;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO wafer_load (wafer_id, step, load) "
        "SELECT id, ?3, ?4 FROM wafer WHERE revision_id = ?1 AND name = ?2", diag);
    for (size_t i = 0; s == SL_OK && i < layout->n_wafers; i++)
        for (size_t b = 0; s == SL_OK && layout->wafers[i].load && b < plan->n_batches; b++) {
            if (layout->wafers[i].load[b] == 0)
                continue;
            sl__db_bind_int64(st, 1, revision_id);
            sl__db_bind_text(st, 2, layout->wafers[i].wafer, -1);
            sl__db_bind_text(st, 3, plan->batches[b].step, -1);
            sl__db_bind_int64(st, 4, (long long)layout->wafers[i].load[b]);
            s = sl__store_step_done(store, st, diag, "store a wafer's load");
        }
    sl__db_finalize(st);
    return s;
}

static void bind_prediction(sl__stmt *st, long split_id, const sl_prediction *p)
{
    double values[] = {
        p->temperature_K, p->gate_capacitance_F_per_m2 * SL_NF_CM2_PER_F_M2, p->eot_nm,
        p->doping_per_cm2.val, p->doping_per_cm2.sigma, p->cnp_V.val, p->cnp_V.sigma,
        p->gate_min_V, p->gate_max_V, p->max_electron_density_per_cm2,
        p->max_hole_density_per_cm2, p->fermi_at_gate_min_eV, p->fermi_at_gate_max_eV,
        p->gate_efficiency_per_cm2_V, p->thermal_floor_per_cm2, p->thermal_floor_V,
        p->disorder_crossover_K,
    };
    sl__db_bind_int64(st, 1, split_id);
    for (int i = 0; i < (int)(sizeof values / sizeof values[0]); i++)
        sl__db_bind_double(st, i + 2, values[i]);
    sl__db_bind_int64(st, 19, p->cnp_in_range);
}

static sl_status insert_predictions(sl_store *store, const long *split_ids,
                                    const sl_prediction *pred, size_t n, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO prediction VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, "
        "?13, ?14, ?15, ?16, ?17, ?18, ?19)", diag);
    for (size_t i = 0; s == SL_OK && i < n; i++) {
        bind_prediction(st, split_ids[pred[i].split], &pred[i]);
        s = sl__store_step_done(store, st, diag, "store a prediction");
    }
    sl__db_finalize(st);
    return s;
}

sl_status sl_store_save_plan(sl_store *store, int *revision, int *created,
                             const sl_plan *plan, const sl_layout *layout,
                             const sl_prediction *predictions, size_t n_predictions,
                             sl_diag *diag)
{
    char hash[17], newest_hash[17];
    sl_plan_hash_hex(plan, hash);
    long lot_id = 0, revision_id = 0;
    *created = 0;
    sl_status s = lot_id_of(store, &lot_id, plan->lot, 1, diag);
    if (s == SL_OK)
        s = sl__store_lock_lot(store, lot_id, diag);
    if (s == SL_OK)
        s = newest_revision(store, revision, newest_hash, lot_id, diag);
    if (s != SL_OK || strcmp(hash, newest_hash) == 0)
        return s;
    s = sl__store_check_measured_wafers(store, lot_id, plan, layout, diag);
    if (s != SL_OK)
        return s;
    (*revision)++;
    int revived = 0;
    s = revive_revision(store, &revived, lot_id, *revision, hash, diag);
    if (s != SL_OK || revived) {
        *created = s == SL_OK;
        return s;
    }
    long *split_ids = calloc(plan->n_splits ? plan->n_splits : 1, sizeof *split_ids);
    if (!split_ids)
        return SL_ENOMEM;
    s = insert_revision(store, &revision_id, lot_id, *revision, hash, plan, diag);
    if (s == SL_OK)
        s = insert_splits(store, split_ids, revision_id, plan, layout, diag);
    if (s == SL_OK)
        s = insert_wafers(store, split_ids, revision_id, layout, diag);
    if (s == SL_OK)
        s = insert_wafer_loads(store, revision_id, plan, layout, diag);
    if (s == SL_OK)
        s = insert_predictions(store, split_ids, predictions, n_predictions, diag);
    free(split_ids);
    *created = s == SL_OK;
    return s;
}

char *sl__store_column_strdup(sl__stmt *st, int col)
{
    const char *t = sl__db_column_text(st, col);
    return strdup(t ? (const char *)t : "");
}

sl_status sl__store_count_query(sl_store *store, long *count, const char *sql, long id,
                               sl_diag *diag, const char *what)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, id);
    if (sl__db_step(st) == SL__DB_ROW)
        *count = (long)sl__db_column_int64(st, 0);
    else
        s = sl__store_db_error(store, diag, what);
    sl__db_finalize(st);
    return s;
}

/* The message for an unknown lot, naming the known ones; a failed listing
 * is reported as what it is. */
static sl_status list_known_lots(sl_store *store, const char *lot, sl_diag *diag)
{
    char **names = NULL;
    size_t n = 0;
    char buf[512] = "";
    size_t k = 0;
    sl_status s = sl_store_list_lots(store, &names, &n, diag);
    if (s != SL_OK)
        return s;
    for (size_t i = 0; i < n && k < sizeof buf - 64; i++)
        k += (size_t)snprintf(buf + k, sizeof buf - k, "%s'%s'", i ? ", " : "", names[i]);
    if (n)
        sl_diag_error(diag, "lot '%s' is not in the database (known lots: %s)", lot, buf);
    else
        sl_diag_error(diag, "lot '%s' is not in the database (it has no lots yet; run "
                            "'splitlot predict PLAN' first)", lot);
    sl_store_free_names(names, n);
    return SL_ENOTFOUND;
}

sl_status sl_store_find_lot(sl_store *store, sl_store_lot *out, const char *lot, sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT l.id, r.id, r.revision, l.name, r.plan_text, r.plan_name, r.created_utc "
        "FROM lot l JOIN plan_revision r ON r.lot_id = l.id WHERE l.name = ?1 "
        "ORDER BY r.revision DESC LIMIT 1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_text(st, 1, lot, -1);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        out->lot_id = (long)sl__db_column_int64(st, 0);
        out->revision_id = (long)sl__db_column_int64(st, 1);
        out->revision = sl__db_column_int64(st, 2);
        out->lot = sl__store_column_strdup(st, 3);
        out->plan_text = sl__store_column_strdup(st, 4);
        out->plan_name = sl__store_column_strdup(st, 5);
        out->created_utc = sl__store_column_strdup(st, 6);
    }
    sl__db_finalize(st);
    if (rc == SL__DB_ROW)
        return (out->lot && out->plan_text && out->plan_name && out->created_utc) ? SL_OK : SL_ENOMEM;
    if (rc != SL__DB_DONE)
        return sl__store_db_error(store, diag, "look up the lot");
    return list_known_lots(store, lot, diag);
}

sl_status sl_store_load_lot_revision(sl_store *store, sl_store_lot *out, const sl_store_lot *lot,
                                     long revision_id, sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT revision, plan_text, plan_name, created_utc FROM plan_revision "
        "WHERE id = ?1 AND lot_id = ?2", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, revision_id);
    sl__db_bind_int64(st, 2, lot->lot_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        out->lot_id = lot->lot_id;
        out->revision_id = revision_id;
        out->revision = sl__db_column_int64(st, 0);
        out->lot = strdup(lot->lot);
        out->plan_text = sl__store_column_strdup(st, 1);
        out->plan_name = sl__store_column_strdup(st, 2);
        out->created_utc = sl__store_column_strdup(st, 3);
        s = out->lot && out->plan_text && out->plan_name && out->created_utc ? SL_OK : SL_ENOMEM;
    } else if (rc == SL__DB_DONE) {
        sl_diag_error(diag, "lot '%s': plan revision %ld is not in the database", lot->lot,
                      revision_id);
        s = SL_EDB;
    } else {
        s = sl__store_db_error(store, diag, "read a stored plan");
    }
    sl__db_finalize(st);
    if (s != SL_OK)
        sl_store_lot_clear(out);
    return s;
}

void sl_store_lot_clear(sl_store_lot *lot)
{
    free(lot->lot);
    free(lot->plan_text);
    free(lot->plan_name);
    free(lot->created_utc);
    memset(lot, 0, sizeof *lot);
}

sl_status sl_store_list_lots(sl_store *store, char ***names, size_t *count, sl_diag *diag)
{
    *names = NULL;
    *count = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, "SELECT name FROM lot ORDER BY id", diag);
    if (s != SL_OK)
        return s;
    size_t cap = 0;
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        if (*count == cap) {
            cap = cap ? 2 * cap : 16;
            char **grown = realloc(*names, cap * sizeof **names);
            if (!grown) {
                s = SL_ENOMEM;
                break;
            }
            *names = grown;
        }
        if (!((*names)[*count] = sl__store_column_strdup(st, 0))) {
            s = SL_ENOMEM;
            break;
        }
        (*count)++;
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "list the lots");
    sl__db_finalize(st);
    return s;
}

void sl_store_free_names(char **names, size_t count)
{
    for (size_t i = 0; i < count; i++)
        free(names[i]);
    free(names);
}
