/* SPDX-License-Identifier: MIT
 * The scratch space of an analysis (see include/splitlot/store.h): a lot's
 * devices read wafer by wafer in report order and kept, packed many to a
 * row in this process's own layout, in a temporary table that the database
 * keeps (SQLite in a file, PostgreSQL on the server); the values the
 * medians need packed the same way in a second one; a third lists devices
 * by severity. A pass then reads a few thousand rows, not a row a device.
 * Memory does not grow with the lot. Not for writes to the lot: the scratch
 * reads one snapshot of the database.
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

/* Page cache while a scratch is open (KiB, per database): the passes read
 * each page once, so a larger cache would only grow the process. The
 * store's is larger: keeping a wafer walks four b-trees at once (devices,
 * their index, measurements, the runs' index), whose paths a 256 KiB
 * cache of 16 KiB pages cannot hold, so the same pages were read again
 * and again (a report of 2 million devices spent 0.8 s more in the
 * kernel). */
#define SL_SCRATCH_CACHE_KIB 256
#define SL_SCRATCH_STORE_CACHE_KIB 1024

/* Bytes of packed devices or values a scratch row holds at most: on
 * PostgreSQL about a device, as a cursor reads thousands of rows at a time
 * in text (two hex digits a byte), which would otherwise grow the process.
 * A packed device takes at most PACKED_MAX (a few hundred bytes). */
#define SL_SCRATCH_CHUNK_BYTES 32768
#define SL_SCRATCH_CHUNK_BYTES_PG PACKED_MAX
#define SL_SCRATCH_VALUES_PG 4 /* values a row holds on PostgreSQL */
/* Rows one insert writes on PostgreSQL (a round trip each insert). */
#define SL_SCRATCH_BATCH_PG 256

/* A kept device packed: these numbers (NaN for NULL), then its wafer,
 * name, fit class and fit model, not terminated, of the lengths given. */
typedef struct {
    int64_t group, tag, id, device_id, run_id, die_x, die_y, measurements, n_points;
    double cnp_V, mobility_cm2_per_Vs, n0_per_cm2, r_contact_ohm, hysteresis_V,
        channel_length_um, channel_width_um, electron_mobility_cm2_per_Vs,
        hole_mobility_cm2_per_Vs;
    uint8_t len[4];
} packed_device;

#define ROW_TEXT(f) (sizeof(((sl_store_device_row *)0)->f) - 1)
#define PACKED_MAX \
    (sizeof(packed_device) + ROW_TEXT(wafer) + ROW_TEXT(name) + ROW_TEXT(fit_class) + \
     ROW_TEXT(fit_model))

_Static_assert(PACKED_MAX <= SL_SCRATCH_CHUNK_BYTES_PG &&
                   SL_SCRATCH_VALUES_PG * sizeof(sl_store_scratch_value) <= SL_SCRATCH_CHUNK_BYTES_PG,
               "a packed device or the values of a row fit a chunk");

/* A chunk of packed bytes being written or read back. */
typedef struct {
    unsigned char *bytes;
    size_t len, pos;
} chunk_buf;

struct sl_store_scratch {
    sl_store *store;
    int in_savepoint;
    int own_transaction;         /* PostgreSQL: the snapshot transaction is the scratch's */
    int cache_set;
    long main_cache, temp_cache; /* cache_size before, restored at the end */
    sl__stmt *select;        /* a wafer's devices from the store */
    sl__stmt *select_any, *select_one_run; /* select is one of them */
    long only_run;           /* the view's run when it has one, else 0 */
    sl__stmt *keep, *kept;   /* packed devices: insert, read back */
    sl__stmt *keep_value, *values; /* packed values: insert, read back */
    sl__stmt *rank, *ranked; /* ranked devices: insert, read back */
    struct pending_rank *pending; /* PostgreSQL: ranked devices not yet sent */
    size_t n_pending;
    sl__stmt *rank_batch;    /* PostgreSQL: RANK_BATCH of them in one INSERT */
    size_t chunk_cap;        /* bytes a scratch row holds */
    size_t values_cap;       /* bytes a row of values holds (at most chunk_cap) */
    chunk_buf out;           /* devices or values being packed */
    size_t batch, n_batched; /* rows an insert writes, rows waiting */
    unsigned char *batched;  /* their bytes, chunk_cap apart */
    size_t *batched_len;
    chunk_buf in_kept, in_values; /* the chunk a reading is in */
    const unsigned char *last; /* the packed device last read, and its size */
    size_t last_len;
    unsigned char *ranked_copy; /* a ranked device's packed bytes */
    double temperature_K;        /* the view's */
    sl_store_device_row row;
};

/* The tables stay with the connection, emptied after each use, so that a
 * history of many lots does not change the schema (and make SQLite read it
 * again) for each. Ranked devices are read in the order of their index, so
 * no sort is held. */
static const char scratch_tables_sql[] =
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_run (id INTEGER PRIMARY KEY);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_kept (chunk BLOB NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_values (chunk BLOB NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_rank (severity REAL NOT NULL, "
    "wafer TEXT NOT NULL, device TEXT NOT NULL, packed BLOB NOT NULL);"
    "CREATE INDEX IF NOT EXISTS temp.sl_scratch_rank_order "
    "ON sl_scratch_rank (severity DESC, wafer, device)";
/* The same on PostgreSQL: rowid spelled out, names in byte order as SQLite
 * compares them. */
static const char scratch_tables_pg_sql[] =
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_run (id bigint PRIMARY KEY);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_kept ("
    "rowid bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY, chunk bytea NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_values ("
    "rowid bigint GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY, chunk bytea NOT NULL);"
    "CREATE TEMP TABLE IF NOT EXISTS sl_scratch_rank (severity double precision NOT NULL, "
    "wafer text COLLATE \"C\" NOT NULL, device text COLLATE \"C\" NOT NULL, "
    "packed bytea NOT NULL);"
    "CREATE INDEX IF NOT EXISTS sl_scratch_rank_order "
    "ON sl_scratch_rank (severity DESC, wafer, device)";
static const char empty_tables_sql[] =
    "DELETE FROM sl_scratch_run; DELETE FROM sl_scratch_kept; "
    "DELETE FROM sl_scratch_values; DELETE FROM sl_scratch_rank";

static const char view_sql[] =
    "INSERT INTO sl_scratch_run (id) SELECT id FROM measurement_run "
    "WHERE lot_id = ?1 AND step = ?2 AND temperature_K = ?3";

/* One wafer's devices, each with its newest measurement in the view's runs
 * (a re-probe supersedes the earlier run), sorted by die: a sort as small
 * as a wafer. */
static const char select_sql[] =
    "SELECT m.id, d.id, m.run_id, d.name, m.fit_class, coalesce(m.fit_model, ''), m.cnp_V, "
    "d.die_x, d.die_y, m.mobility_cm2_per_Vs, m.n0_per_cm2, m.r_contact_ohm, m.hysteresis_V, "
    "d.channel_length_um, d.channel_width_um, "
    "m.electron_mobility_cm2_per_Vs, m.hole_mobility_cm2_per_Vs, "
    "(SELECT count(*) FROM measurement c WHERE c.device_id = d.id "
    "AND c.run_id IN (SELECT id FROM sl_scratch_run)), coalesce(m.n_points, 0) "
    "FROM device d JOIN measurement m ON m.id = (SELECT c.id FROM measurement c "
    "WHERE c.device_id = d.id AND c.run_id IN (SELECT id FROM sl_scratch_run) "
    "ORDER BY c.run_id DESC LIMIT 1) "
    "WHERE d.lot_id = ?1 AND d.wafer = ?2 "
    "ORDER BY d.die_y, d.die_x, d.name";
/* The same when the view has one run (?3), as it mostly has: a device's
 * measurement in it is its newest and only one, found by the run's index. */
static const char select_one_run_sql[] =
    "SELECT m.id, d.id, m.run_id, d.name, m.fit_class, coalesce(m.fit_model, ''), m.cnp_V, "
    "d.die_x, d.die_y, m.mobility_cm2_per_Vs, m.n0_per_cm2, m.r_contact_ohm, m.hysteresis_V, "
    "d.channel_length_um, d.channel_width_um, "
    "m.electron_mobility_cm2_per_Vs, m.hole_mobility_cm2_per_Vs, 1, coalesce(m.n_points, 0) "
    "FROM device d JOIN measurement m ON m.run_id = ?3 AND m.device_id = d.id "
    "WHERE d.lot_id = ?1 AND d.wafer = ?2 "
    "ORDER BY d.die_y, d.die_x, d.name";
static const char view_runs_sql[] = "SELECT count(*), min(id) FROM sl_scratch_run";
static const char keep_sql[] = "INSERT INTO sl_scratch_kept (chunk) VALUES (?1)";
/* On PostgreSQL an insert writes SL_SCRATCH_BATCH_PG rows, in order, the
 * ones bound NULL left out (the last insert of a wafer has fewer). */
static const char batch_head_sql[] = "INSERT INTO %s (chunk) SELECT c FROM (VALUES ";
static const char batch_row_sql[] = "%s(%d, ?%d::bytea)";
static const char batch_tail_sql[] = ") AS v(k, c) WHERE c IS NOT NULL ORDER BY k";
static const char kept_sql[] = "SELECT chunk FROM sl_scratch_kept ORDER BY rowid";
static const char keep_value_sql[] = "INSERT INTO sl_scratch_values (chunk) VALUES (?1)";
static const char values_sql[] = "SELECT chunk FROM sl_scratch_values ORDER BY rowid";
static const char rank_sql[] =
    "INSERT INTO sl_scratch_rank (severity, wafer, device, packed) VALUES (?1, ?2, ?3, ?4)";
static const char ranked_sql[] =
    "SELECT packed FROM sl_scratch_rank ORDER BY severity DESC, wafer, device";

/* On PostgreSQL flagged devices go to the ranked table RANK_BATCH at a
 * time, in one statement (one round trip to the server instead of as many
 * as devices); the rest before the ranked devices are read back. */
#define RANK_BATCH 256
struct pending_rank {
    double severity;
    char wafer[65], name[65];
    size_t packed_len;
    unsigned char packed[PACKED_MAX];
};

/* "INSERT ... VALUES (?1, ?2, ?3, ?4), (?5, ...)" for n rows (malloc'd). */
static char *rank_rows_sql(size_t n)
{
    size_t size = sizeof rank_sql + n * 48;
    char *sql = malloc(size);
    if (!sql)
        return NULL;
    size_t k = (size_t)snprintf(sql, size, "%.*s", (int)(strstr(rank_sql, "(?1") - rank_sql),
                                rank_sql);
    for (size_t i = 0; i < n; i++)
        k += (size_t)snprintf(sql + k, size - k, "%s(?%zu, ?%zu, ?%zu, ?%zu)", i ? ", " : "",
                              4 * i + 1, 4 * i + 2, 4 * i + 3, 4 * i + 4);
    return sql;
}

static sl_status send_ranks(sl_store_scratch *x, sl_diag *diag)
{
    if (x->n_pending == 0)
        return SL_OK;
    sl__stmt *st = x->n_pending == RANK_BATCH ? x->rank_batch : NULL;
    if (!st) {
        char *sql = rank_rows_sql(x->n_pending);
        sl_status s = sql ? sl__store_prepare(x->store, &st, sql, diag) : SL_ENOMEM;
        free(sql);
        if (s != SL_OK)
            return s;
        if (x->n_pending == RANK_BATCH)
            x->rank_batch = st;
    }
    for (size_t i = 0; i < x->n_pending; i++) {
        const struct pending_rank *r = &x->pending[i];
        sl__db_bind_double(st, (int)(4 * i + 1), r->severity);
        sl__db_bind_text(st, (int)(4 * i + 2), r->wafer, -1);
        sl__db_bind_text(st, (int)(4 * i + 3), r->name, -1);
        sl__db_bind_blob(st, (int)(4 * i + 4), r->packed, r->packed_len);
    }
    sl_status s = sl__store_step_done(x->store, st, diag, "list the flagged devices");
    if (st != x->rank_batch)
        sl__db_finalize(st);
    x->n_pending = 0;
    return s;
}

/* ---- packing ---- */

/* A text column's length, cut to what a packed device holds. */
static size_t text_len(const char *t, size_t max)
{
    return t ? strnlen(t, max) : 0;
}

/* The store's row of a device (select_sql's columns) packed at dst (room
 * for PACKED_MAX bytes); returns the bytes written. */
static size_t pack_device(unsigned char *dst, sl__stmt *st, const char *wafer, long group,
                          long tag)
{
    packed_device p;
    memset(&p, 0, sizeof p);
    p.group = group;
    p.tag = tag;
    p.id = sl__db_column_int64(st, 0);
    p.device_id = sl__db_column_int64(st, 1);
    p.run_id = sl__db_column_int64(st, 2);
    p.cnp_V = sl__store_column_real_or_nan(st, 6);
    p.die_x = sl__db_column_int64(st, 7);
    p.die_y = sl__db_column_int64(st, 8);
    double *numbers[] = { &p.mobility_cm2_per_Vs, &p.n0_per_cm2, &p.r_contact_ohm,
                          &p.hysteresis_V, &p.channel_length_um, &p.channel_width_um,
                          &p.electron_mobility_cm2_per_Vs, &p.hole_mobility_cm2_per_Vs };
    for (int i = 0; i < 8; i++)
        *numbers[i] = sl__store_column_real_or_nan(st, 9 + i);
    p.measurements = sl__db_column_int64(st, 17);
    p.n_points = sl__db_column_int64(st, 18);
    const sl_store_device_row *r = NULL; /* the row's sizes bound the names */
    const char *text[4] = { wafer, sl__db_column_text(st, 3), sl__db_column_text(st, 4),
                            sl__db_column_text(st, 5) };
    const size_t max[4] = { sizeof r->wafer - 1, sizeof r->name - 1, sizeof r->fit_class - 1,
                            sizeof r->fit_model - 1 };
    size_t n = sizeof p;
    for (int i = 0; i < 4; i++) {
        size_t len = text_len(text[i], max[i]);
        p.len[i] = (uint8_t)len;
        memcpy(dst + n, text[i] ? text[i] : "", len);
        n += len;
    }
    memcpy(dst, &p, sizeof p);
    return n;
}

/* The packed device at src (avail bytes) into x->row, its group and tag;
 * returns its size, 0 when it does not fit (a damaged scratch). */
static size_t unpack_device(sl_store_scratch *x, const unsigned char *src, size_t avail,
                            long *group, long *tag)
{
    packed_device p;
    if (avail < sizeof p)
        return 0;
    memcpy(&p, src, sizeof p);
    size_t n = sizeof p;
    sl_store_device_row *r = &x->row;
    char *text[4] = { r->wafer, r->name, r->fit_class, r->fit_model };
    const size_t size[4] = { sizeof r->wafer, sizeof r->name, sizeof r->fit_class,
                             sizeof r->fit_model };
    for (int i = 0; i < 4; i++) {
        if (p.len[i] >= size[i] || n + p.len[i] > avail)
            return 0;
        memcpy(text[i], src + n, p.len[i]);
        text[i][p.len[i]] = '\0';
        n += p.len[i];
    }
    *group = (long)p.group;
    *tag = (long)p.tag;
    r->id = (long)p.id;
    r->device_id = (long)p.device_id;
    r->run_id = (long)p.run_id;
    r->source[0] = '\0';
    r->die_x = (long)p.die_x;
    r->die_y = (long)p.die_y;
    r->temperature_K = x->temperature_K;
    r->cnp_V = p.cnp_V;
    r->cnp_sigma_V = r->rel_rms = r->r_squared = NAN;
    r->mobility_cm2_per_Vs = p.mobility_cm2_per_Vs;
    r->n0_per_cm2 = p.n0_per_cm2;
    r->r_contact_ohm = p.r_contact_ohm;
    r->hysteresis_V = p.hysteresis_V;
    r->channel_length_um = p.channel_length_um;
    r->channel_width_um = p.channel_width_um;
    r->measurements = (long)p.measurements;
    r->n_points = (long)p.n_points;
    r->electron_mobility_cm2_per_Vs = p.electron_mobility_cm2_per_Vs;
    r->hole_mobility_cm2_per_Vs = p.hole_mobility_cm2_per_Vs;
    return n;
}

/* Insert the rows waiting, if any. */
static sl_status insert_batch(sl_store_scratch *x, sl__stmt *insert, sl_diag *diag,
                              const char *what)
{
    if (x->n_batched == 0)
        return SL_OK;
    for (size_t i = 0; i < x->batch; i++) {
        if (i < x->n_batched)
            sl__db_bind_blob(insert, (int)i + 1, x->batched + i * x->chunk_cap,
                             x->batched_len[i]);
        else
            sl__db_bind_null(insert, (int)i + 1);
    }
    x->n_batched = 0;
    return sl__store_step_done(x->store, insert, diag, what);
}

/* The chunk being packed, if any, to the rows waiting; inserted when they
 * fill an insert. */
static sl_status flush_chunk(sl_store_scratch *x, sl__stmt *insert, sl_diag *diag,
                             const char *what)
{
    if (x->out.len == 0)
        return SL_OK;
    memcpy(x->batched + x->n_batched * x->chunk_cap, x->out.bytes, x->out.len);
    x->batched_len[x->n_batched++] = x->out.len;
    x->out.len = 0;
    return x->n_batched == x->batch ? insert_batch(x, insert, diag, what) : SL_OK;
}

/* The last chunk and the rows waiting inserted. */
static sl_status flush_all(sl_store_scratch *x, sl__stmt *insert, sl_diag *diag,
                           const char *what)
{
    sl_status s = flush_chunk(x, insert, diag, what);
    if (s == SL_OK)
        s = insert_batch(x, insert, diag, what);
    x->out.len = x->n_batched = 0;
    return s;
}

/* Room for bytes more in the chunk being packed (cap bytes at most):
 * flushed first when full. */
static sl_status chunk_room(sl_store_scratch *x, size_t bytes, size_t cap, sl__stmt *insert,
                            sl_diag *diag, const char *what)
{
    return x->out.len + bytes > cap ? flush_chunk(x, insert, diag, what) : SL_OK;
}

/* The next row of a chunked reading into in (its bytes copied): 1, 0 at
 * the end (the statement reset), -1 on an error (in diag). */
static int step_back(sl_store_scratch *x, sl__stmt *st, sl_diag *diag, const char *what);

static int next_chunk(sl_store_scratch *x, sl__stmt *st, chunk_buf *in, sl_diag *diag,
                      const char *what)
{
    in->len = in->pos = 0;
    int got = step_back(x, st, diag, what);
    if (got <= 0)
        return got;
    size_t bytes = sl__db_column_bytes(st, 0);
    const void *chunk = sl__db_column_blob(st, 0);
    if (!chunk || bytes == 0 || bytes > x->chunk_cap) {
        sl__db_reset(st);
        sl_diag_error(diag, "the analysis' scratch space is damaged (%s)", what);
        return -1;
    }
    memcpy(in->bytes, chunk, bytes);
    in->len = bytes;
    return 1;
}

static sl_status pragma_value(sl_store *store, long *value, const char *sql, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    if (sl__db_step(st) == SL__DB_ROW)
        *value = (long)sl__db_column_int64(st, 0);
    else
        s = sl__store_db_error(store, diag, "read a setting of the database");
    sl__db_finalize(st);
    return s;
}

static sl_status set_cache(sl_store *store, const char *schema, long size, sl_diag *diag)
{
    char sql[64];
    snprintf(sql, sizeof sql, "PRAGMA %s.cache_size = %ld", schema, size);
    return sl__store_exec(store, sql, diag, "set the page cache size");
}

/* The insert of packed rows into table: one row, or on PostgreSQL a batch. */
static sl_status prepare_insert(sl_store_scratch *x, sl__stmt **out, const char *one_row_sql,
                                const char *table, sl_diag *diag)
{
    if (x->batch == 1)
        return sl__store_prepare(x->store, out, one_row_sql, diag);
    char sql[64 + SL_SCRATCH_BATCH_PG * 32];
    size_t n = (size_t)snprintf(sql, sizeof sql, batch_head_sql, table);
    for (size_t i = 0; i < x->batch && n < sizeof sql; i++)
        n += (size_t)snprintf(sql + n, sizeof sql - n, batch_row_sql, i ? ", " : "", (int)i + 1,
                              (int)i + 1);
    if (n < sizeof sql)
        snprintf(sql + n, sizeof sql - n, "%s", batch_tail_sql);
    return sl__store_prepare(x->store, out, sql, diag);
}

static sl_status scratch_statements(sl_store_scratch *x, sl_diag *diag)
{
    sl_store *store = x->store;
    sl_status s = sl__store_exec(store, sl__store_is_pg(store) ? scratch_tables_pg_sql
                                                             : scratch_tables_sql,
                                diag, "create the scratch tables");
    if (s == SL_OK)
        s = sl__store_exec(store, empty_tables_sql, diag, "empty the scratch tables");
    if (s == SL_OK)
        s = sl__store_prepare_flags(store, &x->select_any, select_sql, SL__DB_STREAM, diag);
    if (s == SL_OK)
        s = sl__store_prepare_flags(store, &x->select_one_run, select_one_run_sql,
                                   SL__DB_STREAM, diag);
    if (s == SL_OK)
        s = prepare_insert(x, &x->keep, keep_sql, "sl_scratch_kept", diag);
    if (s == SL_OK)
        s = sl__store_prepare_flags(store, &x->kept, kept_sql, SL__DB_STREAM, diag);
    if (s == SL_OK)
        s = prepare_insert(x, &x->keep_value, keep_value_sql, "sl_scratch_values", diag);
    if (s == SL_OK)
        s = sl__store_prepare_flags(store, &x->values, values_sql, SL__DB_STREAM, diag);
    if (s == SL_OK)
        s = sl__store_prepare(store, &x->rank, rank_sql, diag);
    if (s == SL_OK)
        s = sl__store_prepare_flags(store, &x->ranked, ranked_sql, SL__DB_STREAM, diag);
    return s;
}

/* Small page caches for the scratch's lifetime. */
static sl_status hold_caches(sl_store_scratch *x, sl_diag *diag)
{
    if (sl__store_is_pg(x->store)) /* the server's caches are its own */
        return SL_OK;
    sl_status s = pragma_value(x->store, &x->main_cache, "PRAGMA main.cache_size", diag);
    if (s == SL_OK)
        s = pragma_value(x->store, &x->temp_cache, "PRAGMA temp.cache_size", diag);
    x->cache_set = s == SL_OK;
    if (s == SL_OK)
        s = set_cache(x->store, "main", -SL_SCRATCH_STORE_CACHE_KIB, diag);
    if (s == SL_OK)
        s = set_cache(x->store, "temp", -SL_SCRATCH_CACHE_KIB, diag);
    return s;
}

/* One snapshot while the scratch is open: a savepoint (SQLite reads one
 * snapshot inside it), or on PostgreSQL a REPEATABLE READ transaction (a
 * savepoint inside a transaction already open). */
static sl_status begin_snapshot(sl_store_scratch *x, sl_diag *diag)
{
    sl_store *store = x->store;
    x->own_transaction = sl__store_is_pg(store) && !sl__db_in_transaction(store->db);
    sl_status s = sl__store_exec(store, x->own_transaction
                                    ? "BEGIN ISOLATION LEVEL REPEATABLE READ"
                                    : "SAVEPOINT sl_scratch",
                                diag, "start reading the lot");
    x->in_savepoint = s == SL_OK && !x->own_transaction;
    if (s != SL_OK)
        x->own_transaction = 0;
    return s;
}

/* The buffers of the chunks, sized for the database. */
static sl_status chunk_buffers(sl_store_scratch *x)
{
    int pg = sl__store_is_pg(x->store);
    x->chunk_cap = pg ? SL_SCRATCH_CHUNK_BYTES_PG : SL_SCRATCH_CHUNK_BYTES;
    x->values_cap = pg ? SL_SCRATCH_VALUES_PG * sizeof(sl_store_scratch_value) : x->chunk_cap;
    x->batch = pg ? SL_SCRATCH_BATCH_PG : 1;
    x->batched = malloc(x->batch * x->chunk_cap);
    x->batched_len = malloc(x->batch * sizeof *x->batched_len);
    x->out.bytes = malloc(x->chunk_cap);
    x->in_kept.bytes = malloc(x->chunk_cap);
    x->in_values.bytes = malloc(x->chunk_cap);
    x->ranked_copy = malloc(x->chunk_cap);
    return x->batched && x->batched_len && x->out.bytes && x->in_kept.bytes &&
                   x->in_values.bytes && x->ranked_copy
               ? SL_OK
               : SL_ENOMEM;
}

sl_status sl_store_scratch_open(sl_store_scratch **out, sl_store *store, sl_diag *diag)
{
    *out = NULL;
    sl_store_scratch *x = calloc(1, sizeof *x);
    if (!x)
        return SL_ENOMEM;
    x->store = store;
    sl_status s = chunk_buffers(x);
    if (s == SL_OK)
        s = begin_snapshot(x, diag);
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
    sl__stmt *st = NULL;
    sl_status s = sl__store_exec(x->store, "DELETE FROM sl_scratch_run", diag,
                                "empty the scratch tables");
    if (s == SL_OK)
        s = sl__store_prepare(x->store, &st, view_sql, diag);
    if (s != SL_OK)
        return s;
    x->temperature_K = temperature_K;
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, step, -1);
    sl__db_bind_double(st, 3, temperature_K);
    s = sl__store_step_once(x->store, st, diag, "choose the view's runs");
    if (s == SL_OK)
        s = sl__store_prepare(x->store, &st, view_runs_sql, diag);
    if (s != SL_OK)
        return s;
    x->only_run = 0;
    if (sl__db_step(st) == SL__DB_ROW) {
        if (sl__db_column_int64(st, 0) == 1)
            x->only_run = (long)sl__db_column_int64(st, 1);
    } else {
        s = sl__store_db_error(x->store, diag, "choose the view's runs");
    }
    sl__db_finalize(st);
    x->select = x->only_run ? x->select_one_run : x->select_any;
    return s;
}

/* Step a read-back statement: 1 with a row, 0 at the end (reset, so the next
 * call starts over), -1 on an error (in diag). */
static int step_back(sl_store_scratch *x, sl__stmt *st, sl_diag *diag, const char *what)
{
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW)
        return 1;
    sl__db_reset(st);
    if (rc == SL__DB_DONE)
        return 0;
    sl__store_db_error(x->store, diag, what);
    return -1;
}

sl_status sl_store_scratch_keep_wafer(sl_store_scratch *x, long lot_id, const char *wafer,
                                      long group, long tag, sl_diag *diag)
{
    static const char what[] = "read the lot's devices";
    if (!x->select) {
        sl_diag_error(diag, "the analysis' scratch has no view (%s)", what);
        return SL_EINPUT;
    }
    sl__db_bind_int64(x->select, 1, lot_id);
    sl__db_bind_text(x->select, 2, wafer, -1);
    if (x->only_run)
        sl__db_bind_int64(x->select, 3, x->only_run);
    sl_status s = SL_OK;
    int got;
    x->out.len = 0;
    while ((got = step_back(x, x->select, diag, what)) > 0 && s == SL_OK) {
        s = chunk_room(x, PACKED_MAX, x->chunk_cap, x->keep, diag, what);
        x->out.len += pack_device(x->out.bytes + x->out.len, x->select, wafer, group, tag);
    }
    if (got > 0) /* stopped by a failed insert */
        sl__db_reset(x->select);
    if (s == SL_OK && got < 0)
        s = SL_EDB;
    if (s == SL_OK)
        s = flush_all(x, x->keep, diag, what);
    x->out.len = x->n_batched = 0;
    return s;
}

/* The next packed device of a chunked reading into x->row, or NULL. */
sl_status sl_store_scratch_next_kept(sl_store_scratch *x, long *group, long *tag,
                                     const sl_store_device_row **row, sl_diag *diag)
{
    static const char what[] = "read the kept devices";
    chunk_buf *in = &x->in_kept;
    *row = NULL;
    if (in->pos == in->len) {
        int got = next_chunk(x, x->kept, in, diag, what);
        if (got <= 0)
            return got < 0 ? SL_EDB : SL_OK;
    }
    size_t n = unpack_device(x, in->bytes + in->pos, in->len - in->pos, group, tag);
    if (n == 0) {
        sl__db_reset(x->kept);
        in->len = in->pos = 0;
        sl_diag_error(diag, "the analysis' scratch space is damaged (%s)", what);
        return SL_EDB;
    }
    x->last = in->bytes + in->pos;
    x->last_len = n;
    in->pos += n;
    *row = &x->row;
    return SL_OK;
}

/* A kept device's values, when of the class and with a V_cnp. */
static int usable_value(sl_store_scratch_value *v, const sl_store_device_row *r, long group,
                        long tag, const char *fit_class)
{
    if (strcmp(r->fit_class, fit_class) != 0 || isnan(r->cnp_V))
        return 0;
    *v = (sl_store_scratch_value){ group, tag, r->cnp_V, r->mobility_cm2_per_Vs, r->n0_per_cm2,
                                   r->hysteresis_V };
    return 1;
}

sl_status sl_store_scratch_keep_values(sl_store_scratch *x, const char *fit_class, sl_diag *diag)
{
    static const char what[] = "keep the devices' values";
    const sl_store_device_row *r = NULL;
    long group, tag;
    sl_store_scratch_value v;
    sl_status s;
    sl_store_scratch_rewind(x);
    x->out.len = 0;
    while ((s = sl_store_scratch_next_kept(x, &group, &tag, &r, diag)) == SL_OK && r) {
        if (!usable_value(&v, r, group, tag, fit_class))
            continue;
        if ((s = chunk_room(x, sizeof v, x->values_cap, x->keep_value, diag, what)) != SL_OK)
            break;
        memcpy(x->out.bytes + x->out.len, &v, sizeof v);
        x->out.len += sizeof v;
    }
    if (s == SL_OK)
        s = flush_all(x, x->keep_value, diag, what);
    x->out.len = x->n_batched = 0;
    sl_store_scratch_rewind(x);
    return s;
}

sl_status sl_store_scratch_next_value(sl_store_scratch *x, int *more, sl_store_scratch_value *v,
                                      sl_diag *diag)
{
    chunk_buf *in = &x->in_values;
    *more = 0;
    if (in->pos == in->len) {
        int got = next_chunk(x, x->values, in, diag, "read the kept values");
        if (got <= 0)
            return got < 0 ? SL_EDB : SL_OK;
        if (in->len % sizeof *v != 0) {
            sl__db_reset(x->values);
            in->len = in->pos = 0;
            sl_diag_error(diag, "the analysis' scratch space is damaged (read the kept values)");
            return SL_EDB;
        }
    }
    memcpy(v, in->bytes + in->pos, sizeof *v);
    in->pos += sizeof *v;
    *more = 1;
    return SL_OK;
}

sl_status sl_store_scratch_rank(sl_store_scratch *x, double severity, sl_diag *diag)
{
    if (sl__store_is_pg(x->store)) {
        if (x->last_len > PACKED_MAX) {
            sl_diag_error(diag, "the analysis' scratch space is damaged (list a flagged device)");
            return SL_EDB;
        }
        if (!x->pending && !(x->pending = malloc(RANK_BATCH * sizeof *x->pending)))
            return SL_ENOMEM;
        struct pending_rank *r = &x->pending[x->n_pending++];
        r->severity = severity;
        snprintf(r->wafer, sizeof r->wafer, "%s", x->row.wafer);
        snprintf(r->name, sizeof r->name, "%s", x->row.name);
        memcpy(r->packed, x->last, x->last_len);
        r->packed_len = x->last_len;
        return x->n_pending == RANK_BATCH ? send_ranks(x, diag) : SL_OK;
    }
    sl__db_bind_double(x->rank, 1, severity);
    sl__db_bind_text(x->rank, 2, x->row.wafer, -1);
    sl__db_bind_text(x->rank, 3, x->row.name, -1);
    sl__db_bind_blob(x->rank, 4, x->last, x->last_len);
    return sl__store_step_done(x->store, x->rank, diag, "list a flagged device");
}

sl_status sl_store_scratch_next_ranked(sl_store_scratch *x, long *group, long *tag,
                                       const sl_store_device_row **row, sl_diag *diag)
{
    static const char what[] = "read the flagged devices";
    *row = NULL;
    sl_status sent = send_ranks(x, diag);
    if (sent != SL_OK)
        return sent;
    int got = step_back(x, x->ranked, diag, what);
    if (got <= 0)
        return got < 0 ? SL_EDB : SL_OK;
    size_t bytes = sl__db_column_bytes(x->ranked, 0);
    const void *packed = sl__db_column_blob(x->ranked, 0);
    if (packed && bytes > 0 && bytes <= x->chunk_cap) {
        memcpy(x->ranked_copy, packed, bytes);
        if (unpack_device(x, x->ranked_copy, bytes, group, tag) == bytes) {
            *row = &x->row;
            return SL_OK;
        }
    }
    sl__db_reset(x->ranked);
    sl_diag_error(diag, "the analysis' scratch space is damaged (%s)", what);
    return SL_EDB;
}

void sl_store_scratch_rewind(sl_store_scratch *x)
{
    sl__db_reset(x->kept);
    sl__db_reset(x->values);
    sl__db_reset(x->ranked);
    x->in_kept.len = x->in_kept.pos = 0;
    x->in_values.len = x->in_values.pos = 0;
}

void sl_store_scratch_close(sl_store_scratch *x)
{
    if (!x)
        return;
    sl__db_finalize(x->select_any);
    sl__db_finalize(x->select_one_run);
    sl__db_finalize(x->keep);
    sl__db_finalize(x->kept);
    sl__db_finalize(x->keep_value);
    sl__db_finalize(x->values);
    sl__db_finalize(x->rank);
    sl__db_finalize(x->rank_batch);
    free(x->pending);
    sl__db_finalize(x->ranked);
    if (x->cache_set) {
        set_cache(x->store, "main", x->main_cache, NULL);
        set_cache(x->store, "temp", x->temp_cache, NULL);
    }
    if (x->own_transaction) /* nothing was written but the scratch tables */
        sl__db_exec(x->store->db, "ROLLBACK");
    if (x->in_savepoint) { /* nothing was written but the scratch tables */
        if (sl__db_exec(x->store->db, empty_tables_sql) != SL__DB_OK)
            sl__db_exec(x->store->db, "ROLLBACK TO sl_scratch");
        sl__db_exec(x->store->db, "RELEASE sl_scratch");
    }
    free(x->batched);
    free(x->batched_len);
    free(x->out.bytes);
    free(x->in_kept.bytes);
    free(x->in_values.bytes);
    free(x->ranked_copy);
    free(x);
}
