/* SPDX-License-Identifier: MIT
 * Device rows of the store: insertion on the import hot path with a cached
 * statement, updates after a re-fit, and removal of a lot's measurements for a
 * replacing import. The sweep blobs live in store_sweep.c.
 */
#include <math.h>
#include <string.h>

#include "store_internal.h"

sl_status sl_store_wafer_id(sl_store *store, long *wafer_id, long revision_id, const char *wafer)
{
    if (!store->find_wafer &&
        sqlite3_prepare_v2(store->db, "SELECT id FROM wafer WHERE revision_id = ?1 AND name = ?2",
                           -1, &store->find_wafer, NULL) != SQLITE_OK)
        return SL_EDB;
    sqlite3_bind_int64(store->find_wafer, 1, revision_id);
    sqlite3_bind_text(store->find_wafer, 2, wafer, -1, SQLITE_TRANSIENT);
    int rc = sqlite3_step(store->find_wafer);
    if (rc == SQLITE_ROW)
        *wafer_id = (long)sqlite3_column_int64(store->find_wafer, 0);
    sqlite3_reset(store->find_wafer);
    return rc == SQLITE_ROW ? SL_OK : (rc == SQLITE_DONE ? SL_ENOTFOUND : SL_EDB);
}

void sl_store_device_init(sl_store_device *d)
{
    memset(d, 0, sizeof *d);
    d->temperature_K = d->cnp_V = d->cnp_sigma_V = NAN;
    d->mobility_cm2_per_Vs = d->mobility_sigma_cm2_per_Vs = NAN;
    d->n0_per_cm2 = d->n0_sigma_per_cm2 = d->r_contact_ohm = d->r_contact_sigma_ohm = NAN;
    d->rel_rms = d->r_squared = NAN;
    d->electron_mobility_cm2_per_Vs = d->hole_mobility_cm2_per_Vs = NAN;
    d->n_spikes = -1;
}

/* fit_model, electron and hole mobility, n_spikes from parameter index first. */
static void bind_fit_details(sqlite3_stmt *st, int first, const sl_store_device *d)
{
    if (d->fit_model)
        sqlite3_bind_text(st, first, d->fit_model, -1, SQLITE_STATIC);
    else
        sqlite3_bind_null(st, first);
    sl_store_bind_real_or_null(st, first + 1, d->electron_mobility_cm2_per_Vs);
    sl_store_bind_real_or_null(st, first + 2, d->hole_mobility_cm2_per_Vs);
    if (d->n_spikes >= 0)
        sqlite3_bind_int64(st, first + 3, d->n_spikes);
    else
        sqlite3_bind_null(st, first + 3);
}

static void bind_device(sqlite3_stmt *st, long lot_id, const sl_store_device *d)
{
    sqlite3_bind_int64(st, 1, lot_id);
    sqlite3_bind_int64(st, 2, d->wafer_id);
    sqlite3_bind_text(st, 3, d->name, -1, SQLITE_TRANSIENT);
    sqlite3_bind_int64(st, 4, d->die_x);
    sqlite3_bind_int64(st, 5, d->die_y);
    sqlite3_bind_text(st, 6, d->source, -1, SQLITE_STATIC);
    sqlite3_bind_text(st, 7, d->fit_class, -1, SQLITE_TRANSIENT);
    double values[] = { d->temperature_K, d->cnp_V, d->cnp_sigma_V, d->mobility_cm2_per_Vs,
                        d->mobility_sigma_cm2_per_Vs, d->n0_per_cm2, d->n0_sigma_per_cm2,
                        d->r_contact_ohm, d->r_contact_sigma_ohm, d->rel_rms, d->r_squared };
    for (int i = 0; i < (int)(sizeof values / sizeof values[0]); i++)
        sl_store_bind_real_or_null(st, 8 + i, values[i]);
    if (d->vg_V)
        sqlite3_bind_int64(st, 19, (sqlite3_int64)d->n_points);
    else
        sqlite3_bind_null(st, 19);
    bind_fit_details(st, 20, d);
    if (d->source_line > 0)
        sqlite3_bind_int64(st, 24, d->source_line);
    else
        sqlite3_bind_null(st, 24);
}

#define INSERT_DEVICE_SQL \
    "INSERT INTO device (lot_id, wafer_id, name, die_x, die_y, source, fit_class, " \
    "temperature_K, cnp_V, cnp_sigma_V, mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs, " \
    "n0_per_cm2, n0_sigma_per_cm2, r_contact_ohm, r_contact_sigma_ohm, rel_rms, " \
    "r_squared, n_points, fit_model, electron_mobility_cm2_per_Vs, " \
    "hole_mobility_cm2_per_Vs, n_spikes, source_line) "
#define INSERT_DEVICE_VALUES \
    "?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, " \
    "?20, ?21, ?22, ?23, ?24"

sl_status sl_store_begin_lot_inserts(sl_store *store, long lot_id, sl_diag *diag)
{
    long devices = 0;
    sl_status s = sl_store_count_devices(store, &devices, lot_id, diag);
    store->new_lot_id = s == SL_OK && devices == 0 ? lot_id : 0;
    return s;
}

/* The cached insert for the lot: a lot that had no devices when its import
 * began can only meet this import's own devices again, all on wafers of one
 * plan revision, which the unique index catches; any other lot also checks
 * the same wafer name under older revisions. */
static sl_status device_insert(sl_store *store, sqlite3_stmt **st, long lot_id, sl_diag *diag)
{
    if (lot_id == store->new_lot_id) {
        if (!store->insert_new_device &&
            sl_store_prepare(store, &store->insert_new_device,
                                     INSERT_DEVICE_SQL "VALUES (" INSERT_DEVICE_VALUES ")",
                                     diag) != SL_OK)
            return SL_EDB;
        *st = store->insert_new_device;
        return SL_OK;
    }
    if (!store->insert_device &&
        sl_store_prepare(store, &store->insert_device,
            INSERT_DEVICE_SQL "SELECT " INSERT_DEVICE_VALUES " "
            /* the same wafer name under an older plan revision of the lot is the
             * same wafer: its devices are duplicates too (CROSS JOIN keeps the
             * index-only order: revisions, wafer by name, device) */
            "WHERE NOT EXISTS (SELECT 1 FROM plan_revision r CROSS JOIN wafer w "
            "CROSS JOIN device d WHERE r.lot_id = ?1 AND w.revision_id = r.id "
            "AND w.name = (SELECT name FROM wafer WHERE id = ?2) AND d.lot_id = ?1 "
            "AND d.wafer_id = w.id AND d.name = ?3)", diag) != SL_OK)
        return SL_EDB;
    *st = store->insert_device;
    return SL_OK;
}

sl_status sl_store_insert_device(sl_store *store, long *device_id, long lot_id,
                                 const sl_store_device *dev, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    if (device_insert(store, &st, lot_id, diag) != SL_OK)
        return SL_EDB;
    bind_device(st, lot_id, dev);
    int rc = sqlite3_step(st);
    sqlite3_reset(st);
    if (rc == SQLITE_CONSTRAINT || (rc & 0xff) == SQLITE_CONSTRAINT ||
        (rc == SQLITE_DONE && sqlite3_changes(store->db) == 0)) {
        sl_diag_error(diag, "duplicate device '%s' on its wafer", dev->name);
        return SL_EINPUT;
    }
    if (rc != SQLITE_DONE)
        return sl_store_db_error(store, diag, "store a device");
    long id = (long)sqlite3_last_insert_rowid(store->db);
    if (device_id)
        *device_id = id;
    if (!dev->vg_V || dev->n_points == 0)
        return SL_OK;
    return sl_store_insert_sweep(store, id, dev, diag);
}

sl_status sl_store_update_device(sl_store *store, long device_id, const sl_store_device *dev,
                                 sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st,
        "UPDATE device SET fit_class = ?2, cnp_V = ?3, cnp_sigma_V = ?4, mobility_cm2_per_Vs = ?5, "
        "mobility_sigma_cm2_per_Vs = ?6, n0_per_cm2 = ?7, n0_sigma_per_cm2 = ?8, "
        "r_contact_ohm = ?9, r_contact_sigma_ohm = ?10, rel_rms = ?11, r_squared = ?12, "
        "n_points = ?13, fit_model = ?14, electron_mobility_cm2_per_Vs = ?15, "
        "hole_mobility_cm2_per_Vs = ?16, n_spikes = ?17 WHERE id = ?1", diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, device_id);
    sqlite3_bind_text(st, 2, dev->fit_class, -1, SQLITE_TRANSIENT);
    double values[] = { dev->cnp_V, dev->cnp_sigma_V, dev->mobility_cm2_per_Vs,
                        dev->mobility_sigma_cm2_per_Vs, dev->n0_per_cm2, dev->n0_sigma_per_cm2,
                        dev->r_contact_ohm, dev->r_contact_sigma_ohm, dev->rel_rms, dev->r_squared };
    for (int i = 0; i < (int)(sizeof values / sizeof values[0]); i++)
        sl_store_bind_real_or_null(st, 3 + i, values[i]);
    sqlite3_bind_int64(st, 13, (sqlite3_int64)dev->n_points);
    bind_fit_details(st, 14, dev);
    s = sl_store_step_once(store, st, diag, "update a device");
    if (s == SL_OK && dev->vg_V)
        s = sl_store_insert_sweep(store, device_id, dev, diag);
    return s;
}

static sl_status count_query(sl_store *store, long *count, const char *sql, long id, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, id);
    *count = sqlite3_step(st) == SQLITE_ROW ? (long)sqlite3_column_int64(st, 0) : 0;
    sqlite3_finalize(st);
    return SL_OK;
}

sl_status sl_store_count_devices(sl_store *store, long *count, long lot_id, sl_diag *diag)
{
    return count_query(store, count, "SELECT count(*) FROM device WHERE lot_id = ?1", lot_id, diag);
}

sl_status sl_store_delete_measurements(sl_store *store, long lot_id, sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    static const char *const sql[] = {
        "DELETE FROM sweep WHERE device_id IN (SELECT id FROM device WHERE lot_id = ?1)",
        "DELETE FROM device WHERE lot_id = ?1",
    };
    for (int i = 0; i < 2; i++) {
        sl_status s = sl_store_prepare(store, &st, sql[i], diag);
        if (s != SL_OK)
            return s;
        sqlite3_bind_int64(st, 1, lot_id);
        s = sl_store_step_once(store, st, diag, "remove the lot's measurements");
        if (s != SL_OK)
            return s;
    }
    return SL_OK;
}

sl_status sl_store_record_import(sl_store *store, long lot_id, const char *kind,
                                 const char *source_name, long rows, long devices,
                                 sl_diag *diag)
{
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st,
        "INSERT INTO import (lot_id, kind, source_name, rows, devices, created_utc) "
        "VALUES (?1, ?2, ?3, ?4, ?5, ?6)", diag);
    if (s != SL_OK)
        return s;
    char now[32];
    sl_store_now_utc(now);
    sqlite3_bind_int64(st, 1, lot_id);
    sqlite3_bind_text(st, 2, kind, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(st, 3, source_name, -1, SQLITE_TRANSIENT);
    sqlite3_bind_int64(st, 4, rows);
    sqlite3_bind_int64(st, 5, devices);
    sqlite3_bind_text(st, 6, now, -1, SQLITE_TRANSIENT);
    s = sl_store_step_once(store, st, diag, "record the import");
    return s;
}
