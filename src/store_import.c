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
    "m.id, m.run_id, d.die_x, d.die_y, coalesce(m.source_line, 0), d.wafer, d.name, " \
    "coalesce(m.points_dropped, 0)"

static void read_import_device(sl__stmt *st, sl_store_import_device *d)
{
    d->id = (long)sl__db_column_int64(st, 0);
    d->run_id = (long)sl__db_column_int64(st, 1);
    d->die_x = (long)sl__db_column_int64(st, 2);
    d->die_y = (long)sl__db_column_int64(st, 3);
    d->source_line = (long)sl__db_column_int64(st, 4);
    const char *wafer = sl__db_column_text(st, 5), *name = sl__db_column_text(st, 6);
    snprintf(d->wafer, sizeof d->wafer, "%s", wafer ? (const char *)wafer : "");
    snprintf(d->name, sizeof d->name, "%s", name ? (const char *)name : "");
    d->points_dropped = (long)sl__db_column_int64(st, 7);
}

static sl_status append_device(sl_store_import_device **devices, size_t *count, size_t *cap,
                               sl__stmt *st)
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

/* " AND <column> IN (ids)" for the runs this transaction added, so rows of
 * other clients' imports on the same server are never counted as this
 * import's; "" when none are known. 0 when it does not fit. */
static int this_import_runs(char *buf, size_t size, const sl_store *store, const char *column)
{
    buf[0] = '\0';
    if (store->n_tx_runs == 0)
        return 1;
    size_t k = (size_t)snprintf(buf, size, " AND %s IN (", column);
    for (size_t i = 0; i < store->n_tx_runs && k < size; i++)
        k += (size_t)snprintf(buf + k, size - k, "%s%ld", i ? ", " : "", store->tx_runs[i]);
    if (k < size)
        k += (size_t)snprintf(buf + k, size - k, ")");
    return k < size;
}

sl_status sl_store_open_devices(sl_store *store, sl_store_import_device **devices,
                                size_t *count, long first_run_id, sl_diag *diag)
{
    *devices = NULL;
    *count = 0;
    char runs[1024], sql[2048];
    if (!this_import_runs(runs, sizeof runs, store, "m.run_id")) {
        sl_diag_error(diag, "too many measurement runs in one import");
        return SL_EINPUT;
    }
    /* the stage table exists once something was staged on this connection */
    snprintf(sql, sizeof sql, "%s%s%s",
             "SELECT " IMPORT_DEVICE_COLUMNS " FROM measurement m JOIN device d ON d.id = m.device_id "
             "WHERE m.run_id >= ?1", runs,
             store->has_stage ? " AND (m.fit_class = 'pending' OR m.id IN (SELECT key FROM stage)) "
                                "ORDER BY m.id"
                              : " AND m.fit_class = 'pending' ORDER BY m.id");
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, first_run_id);
    size_t cap = 0;
    int rc;
    while (s == SL_OK && (rc = sl__db_step(st)) == SL__DB_ROW)
        s = append_device(devices, count, &cap, st);
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "list the devices still to be fitted");
    sl__db_finalize(st);
    if (s != SL_OK) {
        free(*devices);
        *devices = NULL;
        *count = 0;
    }
    return s;
}

/* One scan with a sum per class: a GROUP BY would sort the lot's rows. */
static sl_status count_classes_sql(char *sql, size_t size, size_t n_names, const sl_store *store)
{
    char runs[1024];
    if (!this_import_runs(runs, sizeof runs, store, "run_id"))
        return SL_EINPUT;
    size_t k = (size_t)snprintf(sql, size, "SELECT count(*)");
    for (size_t i = 0; i < n_names && k < size; i++)
        k += (size_t)snprintf(sql + k, size - k,
                              ", sum(CASE WHEN fit_class = ?%zu THEN 1 ELSE 0 END)", i + 2);
    if (k >= size)
        return SL_EINPUT;
    snprintf(sql + k, size - k, " FROM measurement WHERE run_id >= ?1%s", runs);
    return strlen(sql) + 1 < size ? SL_OK : SL_EINPUT;
}

sl_status sl_store_count_classes(sl_store *store, long *counts, const char *const *names,
                                 size_t n_names, long *total, long first_run_id, sl_diag *diag)
{
    char sql[2048];
    if (count_classes_sql(sql, sizeof sql, n_names, store) != SL_OK) {
        sl_diag_error(diag, "too many fit classes to count");
        return SL_EINPUT;
    }
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, first_run_id);
    for (size_t i = 0; i < n_names; i++)
        sl__db_bind_text(st, (int)i + 2, names[i], -1);
    if (sl__db_step(st) == SL__DB_ROW) {
        *total = (long)sl__db_column_int64(st, 0);
        for (size_t i = 0; i < n_names; i++)
            counts[i] = (long)sl__db_column_int64(st, (int)i + 1);
    } else {
        s = sl__store_db_error(store, diag, "count the imported devices");
    }
    sl__db_finalize(st);
    return s;
}
