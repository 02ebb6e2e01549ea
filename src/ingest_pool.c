/* SPDX-License-Identifier: MIT
 * Batches of sweeps and the pool of fitting threads (see ingest_pool.h):
 * persistent POSIX threads, one fit workspace each, items handed out through
 * an atomic counter so uneven fits balance themselves.
 */
#include "ingest_pool.h"

#include <math.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>

#define SL_POOL_MAX_THREADS 64

void sl__fit_batch_free(fit_batch *b)
{
    sl_diag_free(b->diag);
    free(b->items);
    free(b->vg);
    free(b->r);
    free(b->dir);
    free(b->text);
    memset(b, 0, sizeof *b);
}

void sl__fit_batch_clear(fit_batch *b)
{
    b->n_items = 0;
    b->n_points = 0;
    b->text_len = 0;
}

int sl__fit_batch_push_text(fit_batch *b, fit_item *item, const char *text, size_t len)
{
    if (b->text_len + len > b->text_cap) {
        size_t cap = b->text_cap ? b->text_cap : 65536;
        while (cap < b->text_len + len)
            cap *= 2;
        char *grown = realloc(b->text, cap);
        if (!grown)
            return -1;
        b->text = grown;
        b->text_cap = cap;
    }
    if (len)
        memcpy(b->text + b->text_len, text, len);
    item->text_off = b->text_len;
    item->text_len = len;
    b->text_len += len;
    return 0;
}

int sl__fit_batch_reserve_points(fit_batch *b, size_t need)
{
    if (need <= b->cap_points)
        return 0;
    size_t cap = b->cap_points ? b->cap_points : 65536;
    while (cap < need)
        cap *= 2;
    double *vg = realloc(b->vg, cap * sizeof *vg);
    if (vg)
        b->vg = vg;
    double *r = vg ? realloc(b->r, cap * sizeof *r) : NULL;
    if (r)
        b->r = r;
    signed char *dir = r ? realloc(b->dir, cap * sizeof *dir) : NULL;
    if (!vg || !r || !dir)
        return -1;
    b->dir = dir;
    b->cap_points = cap;
    return 0;
}

int sl__fit_batch_push(fit_batch *b, const fit_item *item)
{
    if (b->n_items == b->cap_items) {
        size_t cap = b->cap_items ? 2 * b->cap_items : 256;
        fit_item *items = realloc(b->items, cap * sizeof *items);
        if (!items)
            return -1;
        b->items = items;
        b->cap_items = cap;
    }
    b->items[b->n_items++] = *item;
    return 0;
}

typedef struct {
    fit_pool *pool;
    int index;
} worker_arg;

struct fit_pool {
    pthread_mutex_t mu;
    pthread_cond_t work, done;
    pthread_t tids[SL_POOL_MAX_THREADS];
    sl_fit_workspace *ws[SL_POOL_MAX_THREADS];
    worker_arg args[SL_POOL_MAX_THREADS];
    size_t ws_points;
    int threads, started;
    fit_batch *job;
    atomic_size_t next;
    int generation, finished, completed, quit;
    fit_batch_done done_fn;
    void *done_ctx;
};

static void fit_pool_wait(fit_pool *p);

/* A device whose readings were mostly the meter's overflow code: open. */
static void open_result(sl_fit_result *r, size_t n_points)
{
    const double nan = NAN;
    const sl_fit_params none = { nan, nan, nan, nan };
    const sl_est no_est = { nan, nan };
    *r = (sl_fit_result){ .cls = SL_FIT_OPEN, .p = none, .sigma = none,
                          .electron_mobility_cm2_per_Vs = no_est,
                          .hole_mobility_cm2_per_Vs = no_est,
                          .electron_hole_mobility_ratio = no_est, .rel_rms = nan,
                          .r_squared = nan, .n_points = n_points };
}

static void fit_one(fit_batch *b, fit_item *it, sl_fit_workspace *ws)
{
    it->hysteresis_V = NAN;
    it->is_double = 0;
    if (it->open_by_overflow) {
        open_result(&it->result, it->n);
        it->status = SL_OK;
        return;
    }
    if (it->n < SL_FIT_MIN_POINTS) {
        it->status = SL_EINPUT; /* rows may still come further down the file */
        return;
    }
    sl_fit_double_result d;
    it->status = sl_fit_double_sweep(&d, ws, &it->cfg, b->vg + it->offset, b->r + it->offset,
                                     it->has_direction ? b->dir + it->offset : NULL, it->n);
    it->result = d.device;
    it->is_double = d.is_double;
    it->hysteresis_V = d.hysteresis_V;
}

static void work_on(fit_pool *p, fit_batch *b, sl_fit_workspace *ws)
{
    for (;;) {
        size_t i = atomic_fetch_add(&p->next, 1);
        if (i >= b->n_items)
            return;
        fit_one(b, &b->items[i], ws);
    }
}

static void *worker_main(void *arg)
{
    worker_arg *w = arg;
    fit_pool *p = w->pool;
    int seen = 0;
    pthread_mutex_lock(&p->mu);
    for (;;) {
        while (!p->quit && p->generation == seen)
            pthread_cond_wait(&p->work, &p->mu);
        if (p->quit)
            break;
        seen = p->generation;
        fit_batch *b = p->job;
        pthread_mutex_unlock(&p->mu);
        work_on(p, b, p->ws[w->index]);
        pthread_mutex_lock(&p->mu);
        if (++p->finished == p->started) {
            /* the last thread out hands the batch on, outside the lock */
            pthread_mutex_unlock(&p->mu);
            if (p->done_fn)
                p->done_fn(b, p->done_ctx);
            pthread_mutex_lock(&p->mu);
            p->completed = 1;
            pthread_cond_signal(&p->done);
        }
    }
    pthread_mutex_unlock(&p->mu);
    return NULL;
}

fit_pool *sl__fit_pool_new(int threads, fit_batch_done done, void *done_ctx)
{
    fit_pool *p = calloc(1, sizeof *p);
    if (!p)
        return NULL;
    p->done_fn = done;
    p->done_ctx = done_ctx;
    p->threads = threads < 1 ? 1 : (threads > SL_POOL_MAX_THREADS ? SL_POOL_MAX_THREADS : threads);
    pthread_mutex_init(&p->mu, NULL);
    pthread_cond_init(&p->work, NULL);
    pthread_cond_init(&p->done, NULL);
    atomic_init(&p->next, 0);
    for (int t = 0; t < p->threads; t++) {
        p->args[t] = (worker_arg){ p, t };
        if (pthread_create(&p->tids[t], NULL, worker_main, &p->args[t]) != 0)
            break;
        p->started++;
    }
    if (p->started == 0) {
        sl__fit_pool_free(p);
        return NULL;
    }
    return p;
}

void sl__fit_pool_free(fit_pool *p)
{
    if (!p)
        return;
    fit_pool_wait(p);
    pthread_mutex_lock(&p->mu);
    p->quit = 1;
    pthread_cond_broadcast(&p->work);
    pthread_mutex_unlock(&p->mu);
    for (int t = 0; t < p->started; t++)
        pthread_join(p->tids[t], NULL);
    for (int t = 0; t < p->threads; t++)
        sl_fit_workspace_free(p->ws[t]);
    pthread_cond_destroy(&p->work);
    pthread_cond_destroy(&p->done);
    pthread_mutex_destroy(&p->mu);
    free(p);
}

/* Workspaces big enough for the batch's longest sweep; workers are idle. */
static sl_status size_workspaces(fit_pool *p, const fit_batch *b)
{
    size_t need = SL_FIT_MIN_POINTS;
    for (size_t i = 0; i < b->n_items; i++)
        if (b->items[i].n > need)
            need = b->items[i].n;
    if (need <= p->ws_points)
        return SL_OK;
    for (int t = 0; t < p->started; t++) {
        sl_fit_workspace_free(p->ws[t]);
        p->ws[t] = sl_fit_workspace_new(need);
        if (!p->ws[t]) {
            p->ws_points = 0;
            return SL_ENOMEM;
        }
    }
    p->ws_points = need;
    return SL_OK;
}

sl_status sl__fit_pool_submit(fit_pool *p, fit_batch *b)
{
    fit_pool_wait(p);
    sl_status st = size_workspaces(p, b);
    if (st != SL_OK)
        return st;
    pthread_mutex_lock(&p->mu);
    p->job = b;
    atomic_store(&p->next, 0);
    p->finished = 0;
    p->completed = 0;
    p->generation++;
    pthread_cond_broadcast(&p->work);
    pthread_mutex_unlock(&p->mu);
    return SL_OK;
}

/* Wait until the submitted batch is fitted and handed over (no-op when none is). */
static void fit_pool_wait(fit_pool *p)
{
    pthread_mutex_lock(&p->mu);
    while (p->job && !p->completed)
        pthread_cond_wait(&p->done, &p->mu);
    p->job = NULL;
    pthread_mutex_unlock(&p->mu);
}
