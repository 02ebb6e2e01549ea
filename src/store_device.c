/* SPDX-License-Identifier: MIT
 * Devices and their measurements in the store: a measurement added to a run
 * on the import hot path with cached statements (the device found by lot,
 * wafer name and name, or added), updates after a re-fit, and counts. The
 * sweep blobs live in store_sweep.c, the runs in store_run.c.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

void sl_store_device_init(sl_store_device *d)
{
    memset(d, 0, sizeof *d);
    d->channel_length_um = d->channel_width_um = NAN;
    d->cnp_V = d->cnp_sigma_V = NAN;
    d->mobility_cm2_per_Vs = d->mobility_sigma_cm2_per_Vs = NAN;
    d->n0_per_cm2 = d->n0_sigma_per_cm2 = d->r_contact_ohm = d->r_contact_sigma_ohm = NAN;
    d->rel_rms = d->r_squared = NAN;
    d->electron_mobility_cm2_per_Vs = d->hole_mobility_cm2_per_Vs = NAN;
    d->hysteresis_V = d->drain_bias_V = NAN;
    d->n_spikes = d->points_dropped = -1;
}

static void bind_text_or_null(sl__stmt *st, int index, const char *text)
{
    if (text)
        sl__db_bind_text(st, index, text, -1);
    else
        sl__db_bind_null(st, index);
}

static void bind_count_or_null(sl__stmt *st, int index, long v)
{
    if (v >= 0)
        sl__db_bind_int64(st, index, v);
    else
        sl__db_bind_null(st, index);
}

/* The extraction columns, in MEASUREMENT_COLUMNS order, from index first. */
static void bind_extraction(sl__stmt *st, int first, const sl_store_device *d)
{
    sl__db_bind_text(st, first, d->fit_class, -1);
    bind_text_or_null(st, first + 1, d->fit_model);
    double values[] = { d->cnp_V, d->cnp_sigma_V, d->mobility_cm2_per_Vs,
                        d->mobility_sigma_cm2_per_Vs, d->n0_per_cm2, d->n0_sigma_per_cm2,
                        d->r_contact_ohm, d->r_contact_sigma_ohm, d->rel_rms, d->r_squared };
    for (int i = 0; i < 10; i++)
        sl__store_bind_real_or_null(st, first + 2 + i, values[i]);
    if (d->vg_V)
        sl__db_bind_int64(st, first + 12, (long long)d->n_points);
    else
        sl__db_bind_null(st, first + 12);
    sl__store_bind_real_or_null(st, first + 13, d->electron_mobility_cm2_per_Vs);
    sl__store_bind_real_or_null(st, first + 14, d->hole_mobility_cm2_per_Vs);
    bind_count_or_null(st, first + 15, d->n_spikes);
    sl__store_bind_real_or_null(st, first + 16, d->hysteresis_V);
    bind_count_or_null(st, first + 17, d->points_dropped);
}

/* Step an INSERT ... ON CONFLICT DO NOTHING RETURNING id: *added 1 and *id
 * for a new row, *added 0 when a unique key turned it away. */
static sl_status step_returning(sl_store *store, sl__stmt *st, int *added, long *id,
                                sl_diag *diag, const char *what)
{
    int rc = sl__db_step(st);
    *added = rc == SL__DB_ROW;
    if (rc == SL__DB_ROW)
        *id = (long)sl__db_column_int64(st, 0);
    sl__db_reset(st);
    return rc == SL__DB_ROW || rc == SL__DB_DONE ? SL_OK : sl__store_db_error(store, diag, what);
}

/* A cached statement of the import path, prepared on first use. */
static sl_status cached(sl_store *store, sl__stmt **st, const char *sql, sl_diag *diag)
{
    return *st ? SL_OK : sl__store_prepare(store, st, sql, diag);
}

sl_status sl_store_begin_lot_inserts(sl_store *store, long lot_id, sl_diag *diag)
{
    long devices = 0;
    sl_status s = sl__store_lock_lot(store, lot_id, diag);
    if (s == SL_OK)
        s = sl_store_count_devices(store, &devices, lot_id, diag);
    store->new_lot_id = s == SL_OK && devices == 0 ? lot_id : 0;
    /* on a server the rows go in by COPY through a staging table */
    if (s == SL_OK && sl__store_is_pg(store))
        s = sl__store_bulk_begin(store, lot_id, devices, diag);
    return s;
}

/* The device's row id and die, SL_ENOTFOUND when the lot has no such device. */
static sl_status find_device(sl_store *store, sl_store_insert *out, long lot_id,
                             const sl_store_device *d, sl_diag *diag)
{
    sl_status s = cached(store, &store->find_device,
                         "SELECT id, die_x, die_y FROM device WHERE lot_id = ?1 AND wafer = ?2 "
                         "AND name = ?3", diag);
    if (s != SL_OK)
        return s;
    sl__stmt *st = store->find_device;
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, d->wafer, -1);
    sl__db_bind_text(st, 3, d->name, -1);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        out->device_id = (long)sl__db_column_int64(st, 0);
        out->die_x = (long)sl__db_column_int64(st, 1);
        out->die_y = (long)sl__db_column_int64(st, 2);
    }
    sl__db_reset(st);
    if (rc == SL__DB_ROW)
        return SL_OK;
    return rc == SL__DB_DONE ? SL_ENOTFOUND : sl__store_db_error(store, diag, "look up a device");
}

/* A device's identity as parameters ?1 to ?8: lot, wafer, name, die,
 * type and channel (the same order in every insert of a device). */
static void bind_device_identity(sl__stmt *st, long lot_id, const sl_store_device *d)
{
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, d->wafer, -1);
    sl__db_bind_text(st, 3, d->name, -1);
    sl__db_bind_int64(st, 4, d->die_x);
    sl__db_bind_int64(st, 5, d->die_y);
    bind_text_or_null(st, 6, d->device_type);
    sl__store_bind_real_or_null(st, 7, d->channel_length_um);
    sl__store_bind_real_or_null(st, 8, d->channel_width_um);
}

/* Insert the device; *added 0 when the lot has it already (the unique key
 * turned it away: ON CONFLICT DO NOTHING, which leaves a PostgreSQL
 * transaction usable), and nothing was written. */
static sl_status add_device(sl_store *store, int *added, long lot_id, const sl_store_device *d,
                            long *device_id, sl_diag *diag)
{
    sl_status s = cached(store, &store->insert_device,
                         "INSERT INTO device (lot_id, wafer, name, die_x, die_y, device_type, "
                         "channel_length_um, channel_width_um) "
                         "VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8) ON CONFLICT DO NOTHING "
                         "RETURNING id", diag);
    if (s != SL_OK)
        return s;
    sl__stmt *st = store->insert_device;
    bind_device_identity(st, lot_id, d);
    return step_returning(store, st, added, device_id, diag, "store a device");
}

/* The device's first measurement (its line and run), for a die that differs. */
static sl_status first_measurement(sl_store *store, sl_store_insert *out, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT run_id, coalesce(source_line, 0) FROM measurement WHERE device_id = ?1 "
        "ORDER BY run_id LIMIT 1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, out->device_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        out->run_id = (long)sl__db_column_int64(st, 0);
        out->source_line = (long)sl__db_column_int64(st, 1);
    }
    sl__db_finalize(st);
    return rc == SL__DB_ROW || rc == SL__DB_DONE ? SL_OK
                                                 : sl__store_db_error(store, diag, "look up a device");
}

/* The measurement the run has of the device already. */
static sl_status measurement_in_run(sl_store *store, sl_store_insert *out, long run_id,
                                    sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT id, coalesce(source_line, 0) FROM measurement WHERE run_id = ?1 AND device_id = ?2",
        diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, run_id);
    sl__db_bind_int64(st, 2, out->device_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW) {
        out->measurement_id = (long)sl__db_column_int64(st, 0);
        out->source_line = (long)sl__db_column_int64(st, 1);
    }
    sl__db_finalize(st);
    if (rc == SL__DB_ROW)
        return SL_OK;
    return rc == SL__DB_DONE ? sl__store_db_error(store, diag, "find a device's measurement")
                             : sl__store_db_error(store, diag, "look up a device's measurement");
}

/* Insert the measurement row; *added 0 when the run has the device already. */
static sl_status add_measurement(sl_store *store, int *added, long *measurement_id, long run_id,
                                 long device_id, const sl_store_device *d, sl_diag *diag)
{
    sl_status s = cached(store, &store->insert_measurement,
        "INSERT INTO measurement (device_id, run_id, source, source_line, " MEASUREMENT_COLUMNS
        ") VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, "
        "?18, ?19, ?20, ?21, ?22) ON CONFLICT DO NOTHING RETURNING id", diag);
    if (s != SL_OK)
        return s;
    sl__stmt *st = store->insert_measurement;
    sl__db_bind_int64(st, 1, device_id);
    sl__db_bind_int64(st, 2, run_id);
    sl__db_bind_text(st, 3, d->source, -1);
    bind_count_or_null(st, 4, d->source_line > 0 ? d->source_line : -1);
    bind_extraction(st, 5, d);
    return step_returning(store, st, added, measurement_id, diag, "store a measurement");
}

/* The device of the measurement: added (a lot without devices tries the
 * insert first), or found, its die checked. */
static sl_status resolve_device(sl_store *store, sl_store_insert *out, long lot_id,
                                const sl_store_device *d, sl_diag *diag)
{
    int added = 0;
    sl_status s = SL_OK;
    if (lot_id == store->new_lot_id)
        s = add_device(store, &added, lot_id, d, &out->device_id, diag);
    if (s != SL_OK || added)
        return s;
    s = find_device(store, out, lot_id, d, diag);
    if (s == SL_ENOTFOUND) {
        s = add_device(store, &added, lot_id, d, &out->device_id, diag);
        if (s == SL_OK && !added)
            s = sl__store_db_error(store, diag, "store a device");
        return s;
    }
    if (s == SL_OK && (out->die_x != d->die_x || out->die_y != d->die_y)) {
        out->outcome = SL_STORE_DIE_DIFFERS;
        s = first_measurement(store, out, diag);
    }
    return s;
}

sl_status sl_store_insert_measurement(sl_store *store, sl_store_insert *out, long lot_id,
                                      long run_id, const sl_store_device *d, sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    if (store->bulk) {
        int staged = 0;
        sl_status s = sl__store_bulk_insert(store, &staged, out, lot_id, run_id, d, diag);
        if (s != SL_OK || staged)
            return s;
    }
    sl_status s = resolve_device(store, out, lot_id, d, diag);
    if (s != SL_OK || out->outcome != SL_STORE_ADDED)
        return s;
    int added = 0;
    s = add_measurement(store, &added, &out->measurement_id, run_id, out->device_id, d, diag);
    if (s != SL_OK)
        return s;
    if (!added) {
        out->outcome = SL_STORE_IN_RUN;
        return measurement_in_run(store, out, run_id, diag);
    }
    if (!d->vg_V || d->n_points == 0)
        return SL_OK;
    return sl__store_insert_sweep(store, out->measurement_id, d, diag);
}

sl_status sl_store_update_measurement(sl_store *store, long measurement_id,
                                      const sl_store_device *dev, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "UPDATE measurement SET (" MEASUREMENT_COLUMNS ") = (?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, "
        "?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19) WHERE id = ?1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, measurement_id);
    bind_extraction(st, 2, dev);
    s = sl__store_step_once(store, st, diag, "update a measurement");
    if (s == SL_OK && dev->vg_V)
        s = sl__store_insert_sweep(store, measurement_id, dev, diag);
    return s;
}

sl_status sl_store_count_devices(sl_store *store, long *count, long lot_id, sl_diag *diag)
{
    return sl__store_count_query(store, count, "SELECT count(*) FROM device WHERE lot_id = ?1",
                                lot_id, diag, "count the lot's devices");
}
