/* SPDX-License-Identifier: MIT
 * Reads of the store for analysis: a lot's current measurements in a view
 * and every lot with its newest plan revision (see include/splitlot/store.h).
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

static void copy_text(char *dst, size_t size, sl__stmt *st, int col)
{
    const char *t = sl__db_column_text(st, col);
    snprintf(dst, size, "%s", t ? (const char *)t : "");
}

static void read_device_row(sl__stmt *st, sl_store_device_row *r)
{
    r->id = (long)sl__db_column_int64(st, 0);
    r->device_id = (long)sl__db_column_int64(st, 1);
    r->run_id = (long)sl__db_column_int64(st, 2);
    copy_text(r->wafer, sizeof r->wafer, st, 3);
    copy_text(r->name, sizeof r->name, st, 4);
    r->die_x = (long)sl__db_column_int64(st, 5);
    r->die_y = (long)sl__db_column_int64(st, 6);
    copy_text(r->fit_class, sizeof r->fit_class, st, 7);
    copy_text(r->source, sizeof r->source, st, 8);
    copy_text(r->fit_model, sizeof r->fit_model, st, 9);
    double *numbers[] = { &r->temperature_K, &r->cnp_V, &r->cnp_sigma_V, &r->mobility_cm2_per_Vs,
                          &r->n0_per_cm2, &r->r_contact_ohm, &r->hysteresis_V,
                          &r->channel_length_um, &r->channel_width_um, &r->rel_rms,
                          &r->r_squared };
    for (int i = 0; i < 11; i++)
        *numbers[i] = sl__store_column_real_or_nan(st, 10 + i);
    r->n_points = (long)sl__db_column_int64(st, 21);
    r->measurements = (long)sl__db_column_int64(st, 22);
    r->electron_mobility_cm2_per_Vs = sl__store_column_real_or_nan(st, 23);
    r->hole_mobility_cm2_per_Vs = sl__store_column_real_or_nan(st, 24);
}

sl_status sl_store_load_devices(sl_store *store, sl_store_device_row **rows, size_t *count,
                                long lot_id, const char *step, double temperature_K,
                                sl_diag *diag)
{
    *rows = NULL;
    *count = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "WITH runs AS (SELECT id FROM measurement_run WHERE lot_id = ?1 AND step = ?2 "
        "AND temperature_K = ?3) "
        "SELECT m.id, d.id, m.run_id, d.wafer, d.name, d.die_x, d.die_y, m.fit_class, m.source, "
        "coalesce(m.fit_model, ''), ?3, m.cnp_V, m.cnp_sigma_V, m.mobility_cm2_per_Vs, "
        "m.n0_per_cm2, m.r_contact_ohm, m.hysteresis_V, d.channel_length_um, d.channel_width_um, "
        "m.rel_rms, m.r_squared, coalesce(m.n_points, 0), "
        "(SELECT count(*) FROM measurement c WHERE c.device_id = d.id AND c.run_id IN (SELECT id FROM runs)), "
        "m.electron_mobility_cm2_per_Vs, m.hole_mobility_cm2_per_Vs "
        "FROM device d JOIN measurement m ON m.id = (SELECT c.id FROM measurement c "
        "WHERE c.device_id = d.id AND c.run_id IN (SELECT id FROM runs) ORDER BY c.run_id DESC LIMIT 1) "
        "WHERE d.lot_id = ?1 ORDER BY d.wafer, d.die_y, d.die_x, d.name", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, step, -1);
    sl__db_bind_double(st, 3, temperature_K);
    size_t cap = 0;
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        if (*count == cap) {
            cap = cap ? 2 * cap : 1024;
            sl_store_device_row *grown = realloc(*rows, cap * sizeof **rows);
            if (!grown) {
                s = SL_ENOMEM;
                break;
            }
            *rows = grown;
        }
        read_device_row(st, &(*rows)[(*count)++]);
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the lot's devices");
    sl__db_finalize(st);
    return s;
}

sl_status sl_store_load_lots(sl_store *store, sl_store_lot **lots, size_t *count, sl_diag *diag)
{
    char **names = NULL;
    size_t n = 0;
    *lots = NULL;
    *count = 0;
    sl_status s = sl_store_list_lots(store, &names, &n, diag);
    if (s == SL_OK && n) {
        *lots = calloc(n, sizeof **lots);
        if (!*lots)
            s = SL_ENOMEM;
    }
    for (size_t i = 0; s == SL_OK && i < n; i++) {
        s = sl_store_find_lot(store, &(*lots)[i], names[i], diag);
        *count = i + 1;
    }
    sl_store_free_names(names, n);
    return s;
}
