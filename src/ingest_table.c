/* SPDX-License-Identifier: MIT
 * Open-addressing hash table of an import's devices (see ingest_table.h).
 */
#include "ingest_table.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

static uint64_t hash_names(const char *wafer, const char *device)
{
    uint64_t h = 1469598103934665603ULL; /* FNV-1a 64 */
    for (const unsigned char *p = (const unsigned char *)wafer; *p; p++)
        h = (h ^ *p) * 1099511628211ULL;
    h = (h ^ 0x1f) * 1099511628211ULL;
    for (const unsigned char *p = (const unsigned char *)device; *p; p++)
        h = (h ^ *p) * 1099511628211ULL;
    return h;
}

void ingest_table_free(ingest_table *t)
{
    for (size_t i = 0; i < t->count; i++) {
        free(t->items[i].wafer);
        free(t->items[i].device);
    }
    free(t->items);
    free(t->slots);
    memset(t, 0, sizeof *t);
}

size_t ingest_table_find(const ingest_table *t, const char *wafer, const char *device)
{
    if (!t->n_slots)
        return (size_t)-1;
    size_t mask = t->n_slots - 1;
    for (size_t i = (size_t)hash_names(wafer, device) & mask;; i = (i + 1) & mask) {
        size_t s = t->slots[i];
        if (!s)
            return (size_t)-1;
        const ingest_device *d = &t->items[s - 1];
        if (strcmp(d->device, device) == 0 && strcmp(d->wafer, wafer) == 0)
            return s - 1;
    }
}

static int rehash(ingest_table *t, size_t n_slots)
{
    size_t *slots = calloc(n_slots, sizeof *slots);
    if (!slots)
        return -1;
    for (size_t k = 0; k < t->count; k++) {
        size_t i = (size_t)hash_names(t->items[k].wafer, t->items[k].device) & (n_slots - 1);
        while (slots[i])
            i = (i + 1) & (n_slots - 1);
        slots[i] = k + 1;
    }
    free(t->slots);
    t->slots = slots;
    t->n_slots = n_slots;
    return 0;
}

size_t ingest_table_add(ingest_table *t, const char *wafer, const char *device)
{
    if (t->count == t->cap) {
        size_t cap = t->cap ? 2 * t->cap : 1024;
        ingest_device *items = realloc(t->items, cap * sizeof *items);
        if (!items)
            return (size_t)-1;
        t->items = items;
        t->cap = cap;
    }
    if (2 * (t->count + 1) > t->n_slots && rehash(t, t->n_slots ? 2 * t->n_slots : 4096) != 0)
        return (size_t)-1;
    ingest_device *d = &t->items[t->count];
    memset(d, 0, sizeof *d);
    d->wafer = strdup(wafer);
    d->device = strdup(device);
    if (!d->wafer || !d->device) {
        free(d->wafer);
        free(d->device);
        return (size_t)-1;
    }
    size_t i = (size_t)hash_names(wafer, device) & (t->n_slots - 1);
    while (t->slots[i])
        i = (i + 1) & (t->n_slots - 1);
    t->slots[i] = ++t->count;
    return t->count - 1;
}
