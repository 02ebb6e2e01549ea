/* SPDX-License-Identifier: MIT
 * Sweep rows of the store: the packed blob of a device's transfer sweep (gate
 * voltages and resistances), its insertion and loading, and the import's
 * scratch table of staged runs, which uses the same blob.
 */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

/* Sweeps are kept as little-endian IEEE 754 doubles, vg then r per point,
 * whatever the host's byte order. */
static void put_le_double(unsigned char *p, double v)
{
    uint64_t bits;
    memcpy(&bits, &v, sizeof bits);
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(bits >> (8 * i));
}

static double get_le_double(const unsigned char *p)
{
    uint64_t bits = 0;
    for (int i = 0; i < 8; i++)
        bits |= (uint64_t)p[i] << (8 * i);
    double v;
    memcpy(&v, &bits, sizeof v);
    return v;
}

unsigned char *sl_store_pack_sweep(const double *vg_V, const double *r_ohm, size_t n)
{
    unsigned char *blob = malloc(n ? n * 16 : 1);
    for (size_t i = 0; blob && i < n; i++) {
        put_le_double(blob + 16 * i, vg_V[i]);
        put_le_double(blob + 16 * i + 8, r_ohm[i]);
    }
    return blob;
}

sl_status sl_store_insert_sweep(sl_store *store, long device_id, const sl_store_device *dev,
                                sl_diag *diag)
{
    if (!store->insert_sweep &&
        sl_store_prepare(store, &store->insert_sweep,
                         "INSERT OR REPLACE INTO sweep (device_id, n_points, points) "
                         "VALUES (?1, ?2, ?3)", diag) != SL_OK)
        return SL_EDB;
    unsigned char *blob = sl_store_pack_sweep(dev->vg_V, dev->r_ohm, dev->n_points);
    if (!blob)
        return SL_ENOMEM;
    sqlite3_stmt *st = store->insert_sweep;
    sqlite3_bind_int64(st, 1, device_id);
    sqlite3_bind_int64(st, 2, (sqlite3_int64)dev->n_points);
    sqlite3_bind_blob(st, 3, blob, (int)(dev->n_points * 16), free);
    return sl_store_step_done(store, st, diag, "store a sweep");
}

/* Staged runs are kept as packed blobs, like stored sweeps: one row per run,
 * and every double comes back bit for bit (a REAL column would turn -0.0 into
 * the integer 0). */
static sl_status ensure_stage(sl_store *store, sl_diag *diag)
{
    if (store->has_stage)
        return SL_OK;
    sl_status s = sl_store_exec(store,
        "CREATE TEMP TABLE IF NOT EXISTS stage (key INTEGER NOT NULL, n_points INTEGER NOT NULL, "
        "points BLOB NOT NULL)", diag, "create the import scratch table");
    if (s == SL_OK)
        s = sl_store_exec(store, "CREATE INDEX IF NOT EXISTS temp.stage_by_key ON stage(key)",
                          diag, "index the import scratch table");
    if (s == SL_OK)
        s = sl_store_prepare(store, &store->stage_point,
                             "INSERT INTO temp.stage (key, n_points, points) VALUES (?1, ?2, ?3)",
                             diag);
    store->has_stage = s == SL_OK;
    return s;
}

sl_status sl_store_stage_points(sl_store *store, long key, const double *vg_V,
                                const double *r_ohm, size_t n, sl_diag *diag)
{
    sl_status s = ensure_stage(store, diag);
    if (s != SL_OK || n == 0)
        return s;
    unsigned char *blob = sl_store_pack_sweep(vg_V, r_ohm, n);
    if (!blob)
        return SL_ENOMEM;
    sqlite3_bind_int64(store->stage_point, 1, key);
    sqlite3_bind_int64(store->stage_point, 2, (sqlite3_int64)n);
    sqlite3_bind_blob(store->stage_point, 3, blob, (int)(n * 16), free);
    return sl_store_step_done(store, store->stage_point, diag, "stage sweep points");
}

sl_status sl_store_staged_points(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                                 long key, sl_diag *diag)
{
    *vg_V = *r_ohm = NULL;
    *n = 0;
    sqlite3_stmt *st = NULL;
    sl_status s = ensure_stage(store, diag);
    if (s == SL_OK)
        s = sl_store_prepare(store, &st,
                             "SELECT n_points, points FROM temp.stage WHERE key = ?1 ORDER BY rowid",
                             diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, key);
    size_t cap = 0;
    while (s == SL_OK && sqlite3_step(st) == SQLITE_ROW) {
        size_t count = (size_t)sqlite3_column_int64(st, 0);
        const unsigned char *blob = sqlite3_column_blob(st, 1);
        if ((size_t)sqlite3_column_bytes(st, 1) != count * 16 || (count && !blob)) {
            sl_diag_error(diag, "staged sweep points are damaged");
            s = SL_EDB;
            break;
        }
        if (*n + count > cap) {
            cap = cap ? 2 * cap : 256;
            while (cap < *n + count)
                cap *= 2;
            double *a = realloc(*vg_V, cap * sizeof *a), *b = a ? realloc(*r_ohm, cap * sizeof *b) : NULL;
            if (a)
                *vg_V = a;
            if (!a || !b) {
                s = SL_ENOMEM;
                break;
            }
            *r_ohm = b;
        }
        for (size_t i = 0; i < count; i++) {
            (*vg_V)[*n + i] = get_le_double(blob + 16 * i);
            (*r_ohm)[*n + i] = get_le_double(blob + 16 * i + 8);
        }
        *n += count;
    }
    sqlite3_finalize(st);
    return s;
}

sl_status sl_store_load_sweep(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                              long device_id, sl_diag *diag)
{
    *vg_V = *r_ohm = NULL;
    *n = 0;
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st,
                                   "SELECT n_points, points FROM sweep WHERE device_id = ?1", diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, device_id);
    if (sqlite3_step(st) != SQLITE_ROW) {
        sqlite3_finalize(st);
        return SL_ENOTFOUND;
    }
    size_t count = (size_t)sqlite3_column_int64(st, 0);
    const unsigned char *blob = sqlite3_column_blob(st, 1);
    size_t bytes = (size_t)sqlite3_column_bytes(st, 1);
    if (bytes != count * 16 || (count && !blob)) {
        sqlite3_finalize(st);
        sl_diag_error(diag, "sweep of device %ld is damaged (%zu bytes for %zu points)", device_id,
                      bytes, count);
        return SL_EDB;
    }
    *vg_V = malloc((count ? count : 1) * sizeof(double));
    *r_ohm = malloc((count ? count : 1) * sizeof(double));
    if (!*vg_V || !*r_ohm) {
        sqlite3_finalize(st);
        free(*vg_V);
        free(*r_ohm);
        *vg_V = *r_ohm = NULL;
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < count; i++) {
        (*vg_V)[i] = get_le_double(blob + 16 * i);
        (*r_ohm)[i] = get_le_double(blob + 16 * i + 8);
    }
    *n = count;
    sqlite3_finalize(st);
    return SL_OK;
}
