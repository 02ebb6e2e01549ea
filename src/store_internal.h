/* SPDX-License-Identifier: MIT
 * Private parts of the store shared by its source files (store.c,
 * store_device.c, store_run.c, store_sweep.c, store_read.c, ...): the handle
 * and small SQLite helpers.
 */
#ifndef SL_STORE_INTERNAL_H
#define SL_STORE_INTERNAL_H

#include <sqlite3.h>

#include "splitlot/store.h"

struct sl_store {
    sqlite3 *db;
    char *path;
    sqlite3_stmt *insert_device; /* cached: the hot path of an import */
    sqlite3_stmt *find_device;
    sqlite3_stmt *insert_measurement;
    long new_lot_id;             /* a lot with no devices before this import, or 0 */
    sqlite3_stmt *insert_sweep;
    sqlite3_stmt *stage_point;
    int has_stage;               /* temp.stage created on this connection */
};

/* Add a located message for the connection's last error; returns SL_EDB. */
sl_status sl_store_db_error(sl_store *store, sl_diag *diag, const char *what);
sl_status sl_store_exec(sl_store *store, const char *sql, sl_diag *diag, const char *what);
sl_status sl_store_prepare(sl_store *store, sqlite3_stmt **stmt, const char *sql, sl_diag *diag);
sl_status sl_store_step_done(sl_store *store, sqlite3_stmt *st, sl_diag *diag, const char *what);
/* The same for a statement used once: stepped, then finalized. */
sl_status sl_store_step_once(sl_store *store, sqlite3_stmt *st, sl_diag *diag, const char *what);
void sl_store_bind_real_or_null(sqlite3_stmt *st, int index, double v);
double sl_store_column_real_or_nan(sqlite3_stmt *st, int col);
void sl_store_now_utc(char out[32]);
/* A query of one count with ?1 bound to id: a failed query is an error
 * naming what, never a count. */
sl_status sl_store_count_query(sl_store *store, long *count, const char *sql, long id,
                               sl_diag *diag, const char *what);
/* A text column as a malloc'd string ("" for NULL); NULL when out of memory. */
char *sl_store_column_strdup(sqlite3_stmt *st, int col);
/* Pack a sweep into the compact blob described in store_sweep.c: malloc'd,
 * its length in *bytes; NULL when out of memory. */
unsigned char *sl_store_pack_sweep(const double *vg_V, const double *r_ohm, size_t n,
                                   size_t *bytes);
/* Unpack a blob of n points, compact or raw (exactly 16 * n bytes), into
 * vg_V and r_ohm (n each). A damaged blob gives SL_EDB and *damage says
 * what is wrong (a static string), else *damage is NULL. */
sl_status sl_store_unpack_sweep(double *vg_V, double *r_ohm, size_t n,
                                const unsigned char *blob, size_t bytes, const char **damage);
/* SL_EINPUT naming them when a new revision (plan, layout) of a lot would
 * move wafers that have devices (see sl_store_save_plan). */
sl_status sl_store_check_measured_wafers(sl_store *store, long lot_id, const sl_plan *plan,
                                         const sl_layout *layout, sl_diag *diag);
/* Store (or replace) the sweep of a device row: dev->vg_V, r_ohm, n_points. */
sl_status sl_store_insert_sweep(sl_store *store, long measurement_id, const sl_store_device *dev,
                                sl_diag *diag);

#endif
