/* SPDX-License-Identifier: MIT
 * Reads of the store for analysis: a lot's devices and every lot with its
 * newest plan revision (see include/splitlot/store.h).
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

static void copy_text(char *dst, size_t size, sqlite3_stmt *st, int col)
{
    const unsigned char *t = sqlite3_column_text(st, col);
    snprintf(dst, size, "%s", t ? (const char *)t : "");
}

static void read_device_row(sqlite3_stmt *st, sl_store_device_row *r)
{
    r->id = (long)sqlite3_column_int64(st, 0);
    copy_text(r->wafer, sizeof r->wafer, st, 1);
    copy_text(r->name, sizeof r->name, st, 2);
    r->die_x = (long)sqlite3_column_int64(st, 3);
    r->die_y = (long)sqlite3_column_int64(st, 4);
    copy_text(r->fit_class, sizeof r->fit_class, st, 5);
    copy_text(r->source, sizeof r->source, st, 6);
    double *numbers[] = { &r->temperature_K, &r->cnp_V, &r->cnp_sigma_V, &r->mobility_cm2_per_Vs,
                          &r->n0_per_cm2, &r->r_contact_ohm, &r->rel_rms, &r->r_squared };
    for (int i = 0; i < 8; i++)
        *numbers[i] = sl_store_column_real_or_nan(st, 7 + i);
    r->n_points = (long)sqlite3_column_int64(st, 15);
    copy_text(r->fit_model, sizeof r->fit_model, st, 16);
}

sl_status sl_store_load_devices(sl_store *store, sl_store_device_row **rows, size_t *count,
                                long lot_id, sl_diag *diag)
{
    *rows = NULL;
    *count = 0;
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st,
        "SELECT d.id, w.name, d.name, d.die_x, d.die_y, d.fit_class, d.source, d.temperature_K, "
        "d.cnp_V, d.cnp_sigma_V, d.mobility_cm2_per_Vs, d.n0_per_cm2, d.r_contact_ohm, "
        "d.rel_rms, d.r_squared, coalesce(d.n_points, 0), d.fit_model "
        "FROM device d JOIN wafer w ON w.id = d.wafer_id WHERE d.lot_id = ?1 "
        "ORDER BY w.name, d.die_y, d.die_x, d.name", diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, lot_id);
    size_t cap = 0;
    int rc;
    while ((rc = sqlite3_step(st)) == SQLITE_ROW) {
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
    if (s == SL_OK && rc != SQLITE_DONE)
        s = sl_store_db_error(store, diag, "read the lot's devices");
    sqlite3_finalize(st);
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
