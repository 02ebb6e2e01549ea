/* SPDX-License-Identifier: MIT
 * Batches of sweeps and the pool of fitting threads (see ingest_pool.h):
 * persistent POSIX threads, one fit workspace each (grown by its own thread
 * for a longer sweep), items handed out through an atomic counter so uneven
 * fits balance themselves, and submitted batches queued in order so the
 * reading thread never waits for the fitting.
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

/* Batches submitted and not yet started, at most the import's ring. */
#define SL_POOL_MAX_QUEUE 8

struct fit_pool {
    pthread_mutex_t mu;
    pthread_cond_t work, done;
    pthread_t tids[SL_POOL_MAX_THREADS];
    sl_fit_workspace *ws[SL_POOL_MAX_THREADS]; /* each thread's own */
    size_t ws_points[SL_POOL_MAX_THREADS];
    worker_arg args[SL_POOL_MAX_THREADS];
    int threads, started;
    /* guarded by mu */
    fit_batch *job;              /* being fitted, NULL when idle */
    fit_batch *queue[SL_POOL_MAX_QUEUE];
    size_t queue_head, queue_len;
    int generation, finished, quit;
    atomic_size_t next;          /* the job's next item to fit */
    fit_batch_done done_fn;
    void *done_ctx;
};

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

/* The thread's workspace, grown to n points when needed; NULL when out of
 * memory. Only its own thread touches it. */
static sl_fit_workspace *workspace_for(fit_pool *p, int t, size_t n)
{
    if (n < SL_FIT_MIN_POINTS)
        n = SL_FIT_MIN_POINTS;
    if (p->ws[t] && n <= p->ws_points[t])
        return p->ws[t];
    sl_fit_workspace_free(p->ws[t]);
    p->ws[t] = sl_fit_workspace_new(n);
    p->ws_points[t] = p->ws[t] ? n : 0;
    return p->ws[t];
}

static void fit_one(fit_pool *p, int t, fit_batch *b, fit_item *it)
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
    sl_fit_workspace *ws = workspace_for(p, t, it->n);
    if (!ws) {
        it->status = SL_ENOMEM; /* the writer fails the import on it */
        return;
    }
    sl_fit_double_result d;
    it->status = sl_fit_double_sweep(&d, ws, &it->cfg, b->vg + it->offset, b->r + it->offset,
                                     it->has_direction ? b->dir + it->offset : NULL, it->n);
    it->result = d.device;
    it->is_double = d.is_double;
    it->hysteresis_V = d.hysteresis_V;
}

static void work_on(fit_pool *p, int t, fit_batch *b)
{
    for (;;) {
        size_t i = atomic_fetch_add(&p->next, 1);
        if (i >= b->n_items)
            return;
        fit_one(p, t, b, &b->items[i]);
    }
}

/* The next queued batch becomes the job (mu held), or the pool goes idle. */
static void start_next_locked(fit_pool *p)
{
    p->job = NULL;
    if (p->queue_len > 0) {
        p->job = p->queue[p->queue_head];
        p->queue_head = (p->queue_head + 1) % SL_POOL_MAX_QUEUE;
        p->queue_len--;
        atomic_store(&p->next, 0);
        p->finished = 0;
        p->generation++;
        pthread_cond_broadcast(&p->work);
    }
    pthread_cond_broadcast(&p->done); /* the queue has room, or the pool is idle */
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
        work_on(p, w->index, b);
        pthread_mutex_lock(&p->mu);
        if (++p->finished == p->started) {
            /* the last thread out hands the batch on, outside the lock;
             * batches submitted meanwhile wait in the queue, in order */
            pthread_mutex_unlock(&p->mu);
            if (p->done_fn)
                p->done_fn(b, p->done_ctx);
            pthread_mutex_lock(&p->mu);
            start_next_locked(p);
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
    pthread_mutex_lock(&p->mu);
    while (p->job || p->queue_len > 0) /* every submitted batch fitted and handed over */
        pthread_cond_wait(&p->done, &p->mu);
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

sl_status sl__fit_pool_submit(fit_pool *p, fit_batch *b)
{
    pthread_mutex_lock(&p->mu);
    while (p->queue_len == SL_POOL_MAX_QUEUE)
        pthread_cond_wait(&p->done, &p->mu);
    p->queue[(p->queue_head + p->queue_len) % SL_POOL_MAX_QUEUE] = b;
    p->queue_len++;
    if (!p->job)
        start_next_locked(p);
    pthread_mutex_unlock(&p->mu);
    return SL_OK;
}
