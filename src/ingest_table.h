/* SPDX-License-Identifier: MIT
 * Private to the ingest module: a hash table of the devices of one results
 * import (one row per device), keyed by wafer and device name, so a
 * duplicate row is recognised in O(1). Sweep imports keep no such table:
 * their devices are looked up in the store.
 */
#ifndef SL_INGEST_TABLE_H
#define SL_INGEST_TABLE_H

#include <stddef.h>

typedef struct {
    char *wafer, *device;
    long first_line;     /* line of the device's row */
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
