/* SPDX-License-Identifier: MIT
 * Queries of an import in progress (see include/splitlot/store.h): the
 * measurements this import has stored so far (in its runs) live in the
 * database, not in the importing process, so an import's memory does not
 * grow with the lot. The measurements still to be fitted at the end and the
 * class counts for the summary are read back from there.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

#define IMPORT_DEVICE_COLUMNS \
    "m.id, m.run_id, d.die_x, d.die_y, coalesce(m.source_line, 0), d.wafer, d.name"

static void read_import_device(sqlite3_stmt *st, sl_store_import_device *d)
{
    d->id = (long)sqlite3_column_int64(st, 0);
    d->run_id = (long)sqlite3_column_int64(st, 1);
    d->die_x = (long)sqlite3_column_int64(st, 2);
    d->die_y = (long)sqlite3_column_int64(st, 3);
    d->source_line = (long)sqlite3_column_int64(st, 4);
    const unsigned char *wafer = sqlite3_column_text(st, 5), *name = sqlite3_column_text(st, 6);
    snprintf(d->wafer, sizeof d->wafer, "%s", wafer ? (const char *)wafer : "");
    snprintf(d->name, sizeof d->name, "%s", name ? (const char *)name : "");
}

static sl_status append_device(sl_store_import_device **devices, size_t *count, size_t *cap,
                               sqlite3_stmt *st)
{
    if (*count == *cap) {
        size_t grown_cap = *cap ? 2 * *cap : 64;
        sl_store_import_device *grown = realloc(*devices, grown_cap * sizeof **devices);
        if (!grown)
            return SL_ENOMEM;
        *devices = grown;
        *cap = grown_cap;
    }
    read_import_device(st, &(*devices)[(*count)++]);
    return SL_OK;
}

sl_status sl_store_open_devices(sl_store *store, sl_store_import_device **devices,
                                size_t *count, long first_run_id, sl_diag *diag)
{
    *devices = NULL;
    *count = 0;
    /* temp.stage exists once something was staged on this connection */
    const char *sql = store->has_stage
        ? "SELECT " IMPORT_DEVICE_COLUMNS " FROM measurement m JOIN device d ON d.id = m.device_id "
          "WHERE m.run_id >= ?1 AND (m.fit_class = 'pending' OR "
          "m.id IN (SELECT key FROM temp.stage)) ORDER BY m.id"
        : "SELECT " IMPORT_DEVICE_COLUMNS " FROM measurement m JOIN device d ON d.id = m.device_id "
          "WHERE m.run_id >= ?1 AND m.fit_class = 'pending' ORDER BY m.id";
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, first_run_id);
    size_t cap = 0;
    int rc;
    while (s == SL_OK && (rc = sqlite3_step(st)) == SQLITE_ROW)
        s = append_device(devices, count, &cap, st);
    if (s == SL_OK && rc != SQLITE_DONE)
        s = sl_store_db_error(store, diag, "list the devices still to be fitted");
    sqlite3_finalize(st);
    if (s != SL_OK) {
        free(*devices);
        *devices = NULL;
        *count = 0;
    }
    return s;
}

/* One scan with a sum per class: a GROUP BY would sort the lot's rows. */
static sl_status count_classes_sql(char *sql, size_t size, size_t n_names)
{
    size_t k = (size_t)snprintf(sql, size, "SELECT count(*)");
    for (size_t i = 0; i < n_names && k < size; i++)
        k += (size_t)snprintf(sql + k, size - k, ", total(fit_class = ?%zu)", i + 2);
    if (k >= size)
        return SL_EINPUT;
    snprintf(sql + k, size - k, " FROM measurement WHERE run_id >= ?1");
    return strlen(sql) + 1 < size ? SL_OK : SL_EINPUT;
}

sl_status sl_store_count_classes(sl_store *store, long *counts, const char *const *names,
                                 size_t n_names, long *total, long first_run_id, sl_diag *diag)
{
    char sql[1024];
    if (count_classes_sql(sql, sizeof sql, n_names) != SL_OK) {
        sl_diag_error(diag, "too many fit classes to count");
        return SL_EINPUT;
    }
    sqlite3_stmt *st = NULL;
    sl_status s = sl_store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sqlite3_bind_int64(st, 1, first_run_id);
    for (size_t i = 0; i < n_names; i++)
        sqlite3_bind_text(st, (int)i + 2, names[i], -1, SQLITE_STATIC);
    if (sqlite3_step(st) == SQLITE_ROW) {
        *total = (long)sqlite3_column_int64(st, 0);
        for (size_t i = 0; i < n_names; i++)
            counts[i] = (long)sqlite3_column_int64(st, (int)i + 1);
    } else {
        s = sl_store_db_error(store, diag, "count the imported devices");
    }
    sqlite3_finalize(st);
    return s;
}
