/* SPDX-License-Identifier: MIT
 * Private parts of the store shared by its source files (store.c,
 * store_device.c, store_run.c, store_sweep.c, store_read.c, ...): the handle
 * and small helpers over the database layer (db_driver.h).
 */
#ifndef SL_STORE_INTERNAL_H
#define SL_STORE_INTERNAL_H

#include "db_driver.h"

#include "splitlot/store.h"

/* The gate voltages of the last sweep packed and their coded column
 * (sl__store_pack_sweep_memo). */
typedef struct {
    double *vg_V;
    unsigned char *coded;
    size_t n, bytes;          /* n 0: nothing kept */
} sl__sweep_memo;

struct sl_store {
    sl__db *db;
    char *path;                  /* shown in messages: a URL without its password */
    sl__stmt *insert_device; /* cached: the hot path of an import */
    sl__stmt *find_device;
    sl__stmt *insert_measurement;
    long new_lot_id;             /* a lot with no devices before this import, or 0 */
    sl__stmt *insert_sweep;
    sl__sweep_memo vg_memo;      /* the last sweep's gate voltages, coded */
    unsigned sweeps_unflushed;   /* sweeps stored since the last writeback hint */
    sl__stmt *stage_point;
    int has_stage;               /* the stage table created on this connection */
    long *tx_runs;               /* runs added in the open transaction (an import's) */
    size_t n_tx_runs, cap_tx_runs;
    struct sl__bulk *bulk;       /* PostgreSQL: an import's rows going in by COPY */
};

/* The extraction columns of a measurement, in the order every insert and
 * update of them binds them (store_device.c, store_bulk.c). */
#define MEASUREMENT_COLUMNS \
    "fit_class, fit_model, cnp_V, cnp_sigma_V, mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs, " \
    "n0_per_cm2, n0_sigma_per_cm2, r_contact_ohm, r_contact_sigma_ohm, rel_rms, r_squared, " \
    "n_points, electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs, n_spikes, " \
    "hysteresis_V, points_dropped"

/* ---- PostgreSQL imports by COPY through a staging table (store_bulk.c) ---- */
typedef struct sl__bulk sl__bulk;
/* Start staging an import's rows into the lot (which has stored_devices). */
sl_status sl__store_bulk_begin(sl_store *store, long lot_id, long stored_devices, sl_diag *diag);
/* Stage a measurement: *staged 1 and out set (SL_STORE_ADDED), or *staged 0
 * when the device was met before in the run or at another die: then the
 * staged rows are stored and the row-by-row path is to take this one. */
sl_status sl__store_bulk_insert(sl_store *store, int *staged, sl_store_insert *out, long lot_id,
                                long run_id, const sl_store_device *d, sl_diag *diag);
/* Abandon the staging (an open COPY cancelled) and free it; NULL-safe. */
void sl__store_bulk_discard(sl_store *store);
/* 1 when storing the staged rows failed; buf gets the store's own reason
 * ("" when the server's error says it). */
int sl__store_bulk_error(const sl_store *store, char *buf, size_t size);

/* Add a located message for the connection's last error; returns SL_EDB. */
sl_status sl__store_db_error(sl_store *store, sl_diag *diag, const char *what);
sl_status sl__store_exec(sl_store *store, const char *sql, sl_diag *diag, const char *what);
sl_status sl__store_prepare(sl_store *store, sl__stmt **stmt, const char *sql, sl_diag *diag);
/* flags: SL__DB_STREAM for a long read (db_driver.h) */
sl_status sl__store_prepare_flags(sl_store *store, sl__stmt **stmt, const char *sql, int flags,
                                 sl_diag *diag);
/* Step an INSERT ... RETURNING id once: *id, and the statement reset. */
sl_status sl__store_step_id(sl_store *store, sl__stmt *st, long *id, sl_diag *diag,
                           const char *what);
/* 1 on a PostgreSQL server (the few dialect differences go through this). */
int sl__store_is_pg(const sl_store *store);
/* Opening on PostgreSQL: session settings and migrations (store_pg.c). */
sl_status sl__store_pg_setup(sl_store *store, sl_diag *diag);
/* Hold the lot for the rest of the transaction (PostgreSQL: an advisory
 * lock, so imports of one lot take turns and of different lots do not). */
sl_status sl__store_lock_lot(sl_store *store, long lot_id, sl_diag *diag);
/* SL_EDB naming a schema version newer than this build. */
sl_status sl__store_refuse_newer(sl_store *store, int version, sl_diag *diag);
/* Location of a database for messages: a URL's password left out (malloc'd). */
char *sl__db_display_name(const char *location);
void sl__db_sqlite_busy_timeout(sl__db *db, int ms);
/* Start the disk writes of what the open transaction has put in the WAL so
 * far, without waiting for them (Linux; nothing elsewhere, or on a server):
 * an import's commit then syncs little more than its last pages, instead of
 * sending every megabyte of the import to the disk after the last row. A
 * hint only: the commit still syncs. */
void sl__db_sqlite_start_writeback(sl__db *db);
sl_status sl__store_step_done(sl_store *store, sl__stmt *st, sl_diag *diag, const char *what);
/* The same for a statement used once: stepped, then finalized. */
sl_status sl__store_step_once(sl_store *store, sl__stmt *st, sl_diag *diag, const char *what);
void sl__store_bind_real_or_null(sl__stmt *st, int index, double v);
double sl__store_column_real_or_nan(sl__stmt *st, int col);
void sl__store_now_utc(char out[32]);
/* A query of one count with ?1 bound to id: a failed query is an error
 * naming what, never a count. */
sl_status sl__store_count_query(sl_store *store, long *count, const char *sql, long id,
                               sl_diag *diag, const char *what);
/* A text column as a malloc'd string ("" for NULL); NULL when out of memory. */
char *sl__store_column_strdup(sl__stmt *st, int col);
/* Pack a sweep into the compact blob described in store_sweep.c: malloc'd,
 * its length in *bytes; NULL when out of memory. drain_bias_V > 0 says
 * every r_ohm is drain_bias_V / |I_d| (NaN when not): the resistances may
 * then be stored as the currents. */
unsigned char *sl__store_pack_sweep(const double *vg_V, const double *r_ohm, size_t n,
                                   double drain_bias_V, size_t *bytes);
/* The same, coding the vg_V column once for a run of sweeps with the same
 * gate voltages (a lot's usually are): memo keeps the last one. */
unsigned char *sl__store_pack_sweep_memo(const double *vg_V, const double *r_ohm, size_t n,
                                        double drain_bias_V, sl__sweep_memo *memo,
                                        size_t *bytes);
void sl__sweep_memo_clear(sl__sweep_memo *memo);
/* Unpack a blob of n points, compact or raw (exactly 16 * n bytes), into
 * vg_V and r_ohm (n each). A damaged blob gives SL_EDB and *damage says
 * what is wrong (a static string), else *damage is NULL. */
sl_status sl__store_unpack_sweep(double *vg_V, double *r_ohm, size_t n,
                                const unsigned char *blob, size_t bytes, const char **damage);
/* SL_EINPUT naming them when a new revision (plan, layout) of a lot would
 * move wafers that have devices (see sl_store_save_plan). */
sl_status sl__store_check_measured_wafers(sl_store *store, long lot_id, const sl_plan *plan,
                                         const sl_layout *layout, sl_diag *diag);
/* Store (or replace) the sweep of a device row: dev->vg_V, r_ohm, n_points. */
sl_status sl__store_insert_sweep(sl_store *store, long measurement_id, const sl_store_device *dev,
                                sl_diag *diag);

#endif
