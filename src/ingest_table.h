/* SPDX-License-Identifier: MIT
 * Private to the ingest module: a hash table of the devices seen by one
 * import, keyed by wafer and device name, so duplicates and devices whose
 * rows come back later in the file are recognised in O(1).
 */
#ifndef SL_INGEST_TABLE_H
#define SL_INGEST_TABLE_H

#include <stddef.h>

typedef struct {
    char *wafer, *device;
    long device_id;      /* row id once stored, 0 before */
    long first_line;     /* line of the device's first row */
    long die_x, die_y;
    size_t wafer_index;  /* into plan->wafers */
    size_t n_points;     /* points stored so far */
    int revisit;         /* rows came back after other devices' rows */
    int fit_class;       /* sl_fit_class once fitted, -1 before */
    double temperature_K;
} ingest_device;

typedef struct {
    ingest_device *items;
    size_t count, cap;
    size_t *slots;       /* index + 1 into items, 0 = empty */
    size_t n_slots;      /* power of two */
} ingest_table;

void ingest_table_free(ingest_table *t);
/* Index of the device, or (size_t)-1. */
size_t ingest_table_find(const ingest_table *t, const char *wafer, const char *device);
/* Add a device (names copied); returns its index or (size_t)-1 when out of memory. */
size_t ingest_table_add(ingest_table *t, const char *wafer, const char *device);

#endif
