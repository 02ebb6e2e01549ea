/* SPDX-License-Identifier: MIT
 * Private to the ingest module: batches of sweeps and a pool of fitting
 * threads. The sweep import (src/ingest_sweeps.c) keeps a ring of four
 * batches: the reading thread fills one while the pool fits others and a
 * writer thread stores fitted ones in file order; the pool's hand-over
 * callback passes each fitted batch on (docs/architecture.md, "Import").
 */
#ifndef SL_INGEST_POOL_H
#define SL_INGEST_POOL_H

#include <stddef.h>

#include "splitlot/fit.h"

typedef struct {
    size_t offset, n;        /* points in the batch arrays */
    sl_fit_config cfg;       /* the wafer's gate, the device's own channel */
    int has_direction;       /* dir[] of the points says forward or reverse */
    int open_by_overflow;    /* too few readings left after overflows: open */
    double drain_bias_V;     /* the one |V_d| of its points (sl_store_device) */
    long overflow, compliance; /* points dropped */
    const char *device_type; /* plan device type, or NULL */
    double channel_length_um, channel_width_um; /* NaN: the plan's device */
    /* the device's identity, copied so the writer reads only the item */
    char wafer[65], name[65];
    long run_id, die_x, die_y, first_line;   /* the measurement run of its temperature */
    sl_fit_result result;
    int is_double;           /* fitted as a double sweep, branch by branch */
    double hysteresis_V;     /* V_cnp(reverse) - V_cnp(forward), NaN if none */
    sl_status status;        /* SL_EINPUT: too few points so far, fitted later;
                                SL_ENOMEM: no memory to fit it */
    long measurement_id;     /* set by the writer (that of the first rows when
                                the device's rows come back later) */
    int rejected;            /* --keep-going: the writer left it out */
    size_t text_off, text_len; /* --rejects: its rows as the file had them */
} fit_item;

typedef struct {
    fit_item *items;
    size_t n_items, cap_items;
    double *vg, *r;
    signed char *dir;        /* +1 forward, -1 reverse, 0 not said */
    size_t n_points, cap_points;
    char *text;              /* --rejects: the items' rows, for those left out */
    size_t text_len, text_cap;
    sl_status write_status;  /* the writer's outcome for the whole batch */
    sl_diag *diag;           /* the writer's messages, read after the wait */
} fit_batch;

void sl__fit_batch_free(fit_batch *b);
void sl__fit_batch_clear(fit_batch *b);
/* Room for need points; returns 0, or -1 when out of memory. */
int sl__fit_batch_reserve_points(fit_batch *b, size_t need);
/* Append the rows text of an item; returns 0, or -1 when out of memory. */
int sl__fit_batch_push_text(fit_batch *b, fit_item *item, const char *text, size_t len);
/* Append an item; returns 0, or -1 when out of memory. */
int sl__fit_batch_push(fit_batch *b, const fit_item *item);

typedef struct fit_pool fit_pool;

/* Called once per batch, on one pool thread, after every item is fitted
 * (the import writes the batch there while its own thread reads on). */
typedef void (*fit_batch_done)(fit_batch *batch, void *ctx);

/* A pool of threads (>= 1) waiting for batches; NULL when out of resources. */
fit_pool *sl__fit_pool_new(int threads, fit_batch_done done, void *done_ctx);
void sl__fit_pool_free(fit_pool *pool);
/* Queue the batch: its items are fitted on the pool's threads once the
 * batches submitted before it are fitted and handed over, in the order they
 * came; it returns at once (unless eight batches wait already). The batch
 * must stay untouched until the hand-over callback has run for it. An item
 * whose fit could not get memory has status SL_ENOMEM. Free waits for every
 * submitted batch. */
sl_status sl__fit_pool_submit(fit_pool *pool, fit_batch *batch);

#endif
