/* SPDX-License-Identifier: MIT
 * Sweep import: rows are grouped into runs of one device; runs are fitted in
 * batches by a pool of threads and written to the store in file order by a
 * writer thread, while this thread reads on. A run ends where the device,
 * its die or its temperature changes (each temperature is a measurement run
 * of its own, never one fit). The writer finds a device that comes back
 * later in the file at the same temperature in the store, stages its rows
 * under its measurement and the device is fitted again at the end. Memory holds a ring
 * of four batches of points and nothing per device, whatever the file size.
 */
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "ingest_internal.h"
#include "ingest_pool.h"

/* Buffers in a ring: one filled by this thread, the others being fitted,
 * waiting for the writer, or written and waiting to be accounted for. */
#define SL_INGEST_BUFFERS 4

typedef enum { BUF_FREE = 0, BUF_FILLING, BUF_SUBMITTED, BUF_WRITTEN } buffer_state;

/* Directions of stored points, run-length coded: entry k is the points of
 * measurement ids[k], segments first[k] .. first[k + 1]. */
typedef struct {
    long *ids;
    size_t *first;           /* n_ids + 1 once closed */
    size_t n_ids, cap_ids;
    signed char *seg_dir;
    size_t *seg_len;
    size_t n_segs, cap_segs;
} dir_log;

/* A later run of a device already stored: its channel and dropped points. */
typedef struct {
    long measurement_id;
    double length_over_width;
    long points_dropped;
} revisit;

static void dir_log_free(dir_log *log);

struct ingest_batch {
    fit_batch buf[SL_INGEST_BUFFERS];
    buffer_state state[SL_INGEST_BUFFERS]; /* guarded by lock */
    int filling;             /* buffer rows go into */
    int oldest;              /* oldest submitted buffer not yet accounted for */
    int in_flight;           /* submitted buffers not yet accounted for */
    fit_pool *pool;
    /* the writer thread: buffers fitted by the pool, written in file order */
    pthread_t writer;
    int writer_started, quit;
    int queue[SL_INGEST_BUFFERS], queue_head, queue_len;
    pthread_mutex_t lock;
    pthread_cond_t changed;
    /* while rows are read, only the writer touches the store; this thread
     * does again once drain_all has seen every buffer written */
    int write_failed;        /* the writer's: later buffers are skipped */
    int reported;            /* a writer failure is already in the diagnostics */
    /* what the file gives for a point */
    int by_current, has_direction, has_compliance;
    /* the least |SI value| that is an instrument overflow, per quantity */
    double overflow_vg, overflow_r, overflow_id, overflow_vd;
    /* the run being read (in buf[filling]) and its device */
    int in_run;
    int run_bad;             /* a problem in its rows: the device is rejected */
    int run_identity_bad;    /* the problem is its identity: rows not read */
    char run_reason[512];
    long run_overflow, run_compliance;
    double run_drain_V;      /* |V_d| of every point so far: -1 before the
                                first, NaN once two differ or for R files */
    sl_fit_config run_cfg;
    const char *run_type;    /* the store's device type and channel (NULL, NaN:
                                the plan's device) */
    double run_length_um, run_width_um;
    size_t run_offset, run_wafer_index;
    long run_first_line, run_x, run_y;
    size_t run_temperature;  /* index into the plan's temperatures */
    char run_wafer[SL_INGEST_MAX_NAME_BYTES + 1], run_name[SL_INGEST_MAX_NAME_BYTES + 1];
    char run_die_x[32], run_die_y[32], run_t[32];
    size_t run_wafer_len, run_name_len, run_die_x_len, run_die_y_len, run_t_len;
    uint64_t run_word[5];    /* their first 8 bytes, as sl_rowsrc_field_word gives
                                them: name, wafer, die x and y, temperature */
    /* written by the writer thread, read once drain_all is done: what the
     * refit of a device met again needs and the store does not keep */
    revisit *revisits;       /* one per later run of a device, in write order */
    size_t n_revisits, cap_revisits;
    dir_log first_dirs;      /* directions of each device's first run (a
                                direction column only), by measurement id */
    dir_log later_dirs;      /* directions of the later runs, in write order */
    /* the writer's count of what the import added (with c->run_devices):
     * measurements in all and per fit class, and whether a device is left
     * to fit at the end (its fit waits for rows later in the file) */
    long added, added_class[SL_FIT_CLASS_COUNT];
    int any_open;
};

static void write_batch(fit_batch *batch, void *ctx);

/* The writer thread: takes fitted buffers in the order the pool finished
 * them, which is file order (the pool fits one buffer at a time). */
static void *writer_main(void *arg)
{
    ingest_ctx *c = arg;
    ingest_batch *b = c->batch;
    pthread_mutex_lock(&b->lock);
    for (;;) {
        while (b->queue_len == 0 && !b->quit)
            pthread_cond_wait(&b->changed, &b->lock);
        if (b->queue_len == 0)
            break;
        int i = b->queue[b->queue_head];
        b->queue_head = (b->queue_head + 1) % SL_INGEST_BUFFERS;
        b->queue_len--;
        pthread_mutex_unlock(&b->lock);
        write_batch(&b->buf[i], c);
        pthread_mutex_lock(&b->lock);
        b->state[i] = BUF_WRITTEN;
        pthread_cond_broadcast(&b->changed);
    }
    pthread_mutex_unlock(&b->lock);
    return NULL;
}

/* The pool's hand-over, on a pool thread: queue the fitted buffer. */
static void fitted(fit_batch *batch, void *ctx)
{
    ingest_batch *b = ((ingest_ctx *)ctx)->batch;
    pthread_mutex_lock(&b->lock);
    b->queue[(b->queue_head + b->queue_len) % SL_INGEST_BUFFERS] = (int)(batch - b->buf);
    b->queue_len++;
    pthread_cond_broadcast(&b->changed);
    pthread_mutex_unlock(&b->lock);
}

void sl__ingest_batch_free(ingest_batch *b)
{
    if (!b)
        return;
    sl__fit_pool_free(b->pool); /* no more hand-overs after this */
    if (b->writer_started) {
        pthread_mutex_lock(&b->lock);
        b->quit = 1;
        pthread_cond_broadcast(&b->changed);
        pthread_mutex_unlock(&b->lock);
        pthread_join(b->writer, NULL);
    }
    for (int i = 0; i < SL_INGEST_BUFFERS; i++)
        sl__fit_batch_free(&b->buf[i]);
    free(b->revisits);
    dir_log_free(&b->first_dirs);
    dir_log_free(&b->later_dirs);
    pthread_cond_destroy(&b->changed);
    pthread_mutex_destroy(&b->lock);
    free(b);
}

static ingest_batch *batch_new(ingest_ctx *c, int threads)
{
    ingest_batch *b = calloc(1, sizeof *b);
    if (!b)
        return NULL;
    pthread_mutex_init(&b->lock, NULL);
    pthread_cond_init(&b->changed, NULL);
    int ok = 1;
    for (int i = 0; i < SL_INGEST_BUFFERS; i++)
        ok = ok && (b->buf[i].diag = sl_diag_new()) != NULL;
    b->state[0] = BUF_FILLING;
    c->batch = b;
    b->pool = ok ? sl__fit_pool_new(threads, fitted, c) : NULL;
    b->writer_started = b->pool && pthread_create(&b->writer, NULL, writer_main, c) == 0;
    if (!b->writer_started) {
        sl__ingest_batch_free(b);
        c->batch = NULL;
        return NULL;
    }
    return b;
}

/* ---- writing fitted devices ---- */

/* The fit model and, after a slash, the density model when it is the
 * charge balance ("symmetric/qc"); no suffix for the short form, which is
 * what every fit stored before the charge balance was. */
static const char *model_name(const sl_fit_config *cfg)
{
    bool qc = cfg->density_table != NULL;
    if (cfg->model == SL_FIT_MODEL_TWO_MOBILITY)
        return qc ? "two-mobility/qc" : "two-mobility";
    return qc ? "symmetric/qc" : "symmetric";
}

/* Fill what the fit found (the device starts from sl_store_device_init). */
static void result_to_device(sl_store_device *dev, const sl_fit_result *r, sl_status st,
                             const sl_fit_config *cfg)
{
    if (st != SL_OK) {
        dev->fit_class = "pending";
        return;
    }
    dev->fit_class = sl_fit_class_name(r->cls);
    dev->fit_model = model_name(cfg);
    dev->rel_rms = r->rel_rms;
    dev->r_squared = r->r_squared;
    dev->n_spikes = (long)r->n_spikes;
    if (r->cls != SL_FIT_OK)
        return; /* no invented numbers for what could not be fitted */
    dev->cnp_V = r->p.cnp_V;
    dev->cnp_sigma_V = r->sigma.cnp_V;
    dev->mobility_cm2_per_Vs = r->p.mobility_cm2_per_Vs;
    dev->mobility_sigma_cm2_per_Vs = r->sigma.mobility_cm2_per_Vs;
    dev->n0_per_cm2 = r->p.n0_per_cm2;
    dev->n0_sigma_per_cm2 = r->sigma.n0_per_cm2;
    dev->r_contact_ohm = r->p.r_contact_ohm;
    dev->r_contact_sigma_ohm = r->sigma.r_contact_ohm;
    if (cfg->model == SL_FIT_MODEL_TWO_MOBILITY) {
        dev->electron_mobility_cm2_per_Vs = r->electron_mobility_cm2_per_Vs.val;
        dev->hole_mobility_cm2_per_Vs = r->hole_mobility_cm2_per_Vs.val;
    }
}

/* The one message for a device met at another die than before. */
static sl_status die_moved(const ingest_ctx *c, sl_diag *diag, long line, const char *device,
                           const char *wafer, const long here[2], const long before[2],
                           long before_line)
{
    sl_store_insert stored = { .die_x = before[0], .die_y = before[1],
                               .source_line = before_line, .run_id = c->first_run_id };
    return sl__ingest_die_moved(c, diag, line, device, wafer, here, &stored);
}

/* ---- what a refit needs that the store does not keep ---- */

static void dir_log_free(dir_log *log)
{
    free(log->ids);
    free(log->first);
    free(log->seg_dir);
    free(log->seg_len);
}

static int dir_log_grow(dir_log *log, size_t segs)
{
    if (log->n_ids + 2 > log->cap_ids) {
        size_t cap = log->cap_ids ? 2 * log->cap_ids : 256;
        long *ids = realloc(log->ids, cap * sizeof *ids);
        if (ids)
            log->ids = ids;
        size_t *first = ids ? realloc(log->first, cap * sizeof *first) : NULL;
        if (!first)
            return -1;
        log->first = first;
        log->cap_ids = cap;
    }
    if (log->n_segs + segs > log->cap_segs) {
        size_t cap = 2 * log->cap_segs > log->n_segs + segs ? 2 * log->cap_segs
                                                             : log->n_segs + segs + 256;
        signed char *dir = realloc(log->seg_dir, cap * sizeof *dir);
        if (dir)
            log->seg_dir = dir;
        size_t *len = dir ? realloc(log->seg_len, cap * sizeof *len) : NULL;
        if (!len)
            return -1;
        log->seg_len = len;
        log->cap_segs = cap;
    }
    return 0;
}

/* The directions of n stored points of measurement id, run-length coded. */
static int dir_log_add(dir_log *log, long id, const signed char *dir, size_t n)
{
    size_t segs = 0;
    for (size_t i = 0; i < n; i++)
        segs += i == 0 || dir[i] != dir[i - 1];
    if (dir_log_grow(log, segs) != 0)
        return -1;
    log->ids[log->n_ids] = id;
    log->first[log->n_ids++] = log->n_segs;
    log->first[log->n_ids] = log->n_segs + segs;
    for (size_t i = 0; i < n; i++) {
        if (i == 0 || dir[i] != dir[i - 1]) {
            log->seg_dir[log->n_segs] = dir[i];
            log->seg_len[log->n_segs++] = 0;
        }
        log->seg_len[log->n_segs - 1]++;
    }
    return 0;
}

/* Write entry k's directions at out[*at ...], at most n in all. */
static void dir_log_put(const dir_log *log, size_t k, signed char *out, size_t *at, size_t n)
{
    for (size_t s = log->first[k]; s < log->first[k + 1]; s++)
        for (size_t i = 0; i < log->seg_len[s] && *at < n; i++)
            out[(*at)++] = log->seg_dir[s];
}

/* The directions of a device's gathered points (its first run, then its
 * later runs in file order); false when the logs do not cover all n. */
static bool gathered_directions(const ingest_batch *b, long id, signed char *out, size_t n)
{
    const dir_log *first = &b->first_dirs, *later = &b->later_dirs;
    size_t lo = 0, hi = first->n_ids, at = 0;
    while (lo < hi) { /* first runs are written in id order */
        size_t mid = lo + (hi - lo) / 2;
        if (first->ids[mid] < id)
            lo = mid + 1;
        else
            hi = mid;
    }
    if (lo == first->n_ids || first->ids[lo] != id)
        return false;
    dir_log_put(first, lo, out, &at, n);
    for (size_t k = 0; k < later->n_ids; k++)
        if (later->ids[k] == id)
            dir_log_put(later, k, out, &at, n);
    return at == n;
}

/* A later run of a stored device: its channel and dropped points, added to
 * its first run's at the refit. */
static int note_revisit(ingest_batch *b, const fit_item *it, long measurement_id)
{
    if (b->n_revisits == b->cap_revisits) {
        size_t cap = b->cap_revisits ? 2 * b->cap_revisits : 64;
        revisit *grown = realloc(b->revisits, cap * sizeof *grown);
        if (!grown)
            return -1;
        b->revisits = grown;
        b->cap_revisits = cap;
    }
    b->revisits[b->n_revisits++] = (revisit){ .measurement_id = measurement_id,
                                              .length_over_width = it->cfg.length_over_width,
                                              .points_dropped = it->overflow + it->compliance };
    return 0;
}

/* The device's channel (NaN when no later run was noted) and the points its
 * later runs dropped. */
static double revisited_channel(const ingest_batch *b, long id, long *dropped)
{
    double length_over_width = NAN;
    *dropped = 0;
    for (size_t k = 0; k < b->n_revisits; k++) {
        if (b->revisits[k].measurement_id != id)
            continue;
        length_over_width = b->revisits[k].length_over_width;
        *dropped += b->revisits[k].points_dropped;
    }
    return length_over_width;
}

/* The writer's notes of a stored run (first or later) for a refit. */
static sl_status note_written(ingest_batch *b, fit_batch *f, const fit_item *it,
                              const sl_store_insert *ins)
{
    int fail = 0;
    if (ins->outcome == SL_STORE_IN_RUN)
        fail = note_revisit(b, it, ins->measurement_id);
    if (!fail && b->has_direction && ins->outcome == SL_STORE_ADDED)
        fail = dir_log_add(&b->first_dirs, ins->measurement_id, f->dir + it->offset, it->n);
    if (!fail && b->has_direction && ins->outcome == SL_STORE_IN_RUN)
        fail = dir_log_add(&b->later_dirs, ins->measurement_id, f->dir + it->offset, it->n);
    return fail ? SL_ENOMEM : SL_OK;
}

/* Count what the store added for an item, as the summary gives it. */
static void count_added(ingest_ctx *c, const fit_item *it, sl_store_outcome outcome)
{
    ingest_batch *b = c->batch;
    b->any_open |= outcome == SL_STORE_IN_RUN; /* staged, fitted again at the end */
    if (outcome != SL_STORE_ADDED)
        return;
    for (size_t t = 0; t < c->revision.n_temperatures; t++)
        c->run_devices[t] += c->run_ids[t] == it->run_id;
    b->added++;
    if (it->status != SL_OK) /* stored "pending", as result_to_device says */
        b->any_open = 1;
    else
        b->added_class[it->result.cls]++;
}

/* Store one fitted device; runs on the writer thread, so it reads only the
 * item and what does not change during the import. A device the run has
 * already (its rows came back later in the file) gets these rows staged
 * under its measurement and is fitted again at the end. */
static sl_status write_item(ingest_ctx *c, fit_batch *b, fit_item *it)
{
    if (it->status == SL_ENOMEM) {
        sl_diag_error(b->diag, "out of memory fitting device '%s' (%zu points)", it->name, it->n);
        return SL_ENOMEM;
    }
    sl_store_device dev;
    sl_store_device_init(&dev);
    dev.wafer = it->wafer;
    dev.name = it->name;
    dev.die_x = it->die_x;
    dev.die_y = it->die_y;
    dev.source = "sweeps";
    dev.vg_V = b->vg + it->offset;
    dev.r_ohm = b->r + it->offset;
    dev.n_points = it->n;
    dev.drain_bias_V = it->drain_bias_V;
    dev.source_line = it->first_line;
    dev.device_type = it->device_type;
    dev.channel_length_um = it->channel_length_um;
    dev.channel_width_um = it->channel_width_um;
    dev.hysteresis_V = it->hysteresis_V;
    dev.points_dropped = it->overflow + it->compliance;
    result_to_device(&dev, &it->result, it->status, &it->cfg);
    sl_store_insert ins;
    sl_status st = sl_store_insert_measurement(c->store, &ins, c->lot.lot_id, it->run_id, &dev,
                                               b->diag);
    if (st != SL_OK)
        return st;
    it->measurement_id = ins.measurement_id;
    count_added(c, it, ins.outcome);
    if ((st = note_written(c->batch, b, it, &ins)) != SL_OK)
        return st;
    if (ins.outcome == SL_STORE_DIE_DIFFERS) {
        const long here[2] = { it->die_x, it->die_y };
        st = sl__ingest_die_moved(c, b->diag, it->first_line, it->name, it->wafer, here, &ins);
        it->rejected = c->opt->keep_going; /* left out, the rest goes on */
        return it->rejected ? SL_OK : st;
    }
    if (ins.outcome == SL_STORE_IN_RUN)
        return sl_store_stage_points(c->store, ins.measurement_id, b->vg + it->offset,
                                     b->r + it->offset, it->n, b->diag);
    return SL_OK;
}

/* Write a fitted buffer in file order; runs on the writer thread. */
static void write_batch(fit_batch *b, void *ctx)
{
    ingest_ctx *c = ctx;
    /* after a failure the import is lost anyway: write nothing more */
    b->write_status = c->batch->write_failed ? SL_EDB : SL_OK;
    for (size_t i = 0; b->write_status == SL_OK && i < b->n_items; i++)
        b->write_status = write_item(c, b, &b->items[i]);
    c->batch->write_failed |= b->write_status != SL_OK;
}

static void take_messages(sl_diag *to, sl_diag *from)
{
    for (size_t i = 0; i < sl_diag_size(from); i++) {
        const sl_diag_msg *m = sl_diag_get(from, i);
        sl_diag_add(to, m->severity, m->file, m->line, m->col, "%s", m->text);
    }
    sl_diag_clear(from);
}

static buffer_state state_of(ingest_batch *b, int i)
{
    pthread_mutex_lock(&b->lock);
    buffer_state st = b->state[i];
    pthread_mutex_unlock(&b->lock);
    return st;
}

static void set_state(ingest_batch *b, int i, buffer_state st)
{
    pthread_mutex_lock(&b->lock);
    b->state[i] = st;
    pthread_mutex_unlock(&b->lock);
}

/* What the summary says of a device besides its class. */
static void count_item(ingest_ctx *c, const fit_item *it)
{
    sl_ingest_summary *s = c->summary;
    s->points_overflow += it->overflow;
    s->devices_with_overflow += it->overflow > 0;
    s->points_compliance += it->compliance;
    s->double_sweeps += it->is_double;
    s->hysteresis_flagged += fabs(it->hysteresis_V) > c->plan->max_hysteresis_V;
}

/* --keep-going: the devices the writer left out (one message each, in
 * order) are reported and their rows go to the rejects file. */
static sl_status reject_left_out(ingest_ctx *c, fit_batch *done)
{
    size_t message = 0;
    sl_status st = SL_OK;
    for (size_t k = 0; st == SL_OK && k < done->n_items; k++) {
        const fit_item *it = &done->items[k];
        if (!it->rejected)
            continue;
        const sl_diag_msg *m = message < sl_diag_size(done->diag)
                                   ? sl_diag_get(done->diag, message++) : NULL;
        st = sl__ingest_reject_rows(c, done->text ? done->text + it->text_off : "", it->text_len,
                                m ? m->text : "rejected");
    }
    take_messages(c->diag, done->diag);
    sl__ingest_flush_errors(c);
    return st;
}

/* Wait until the oldest submitted buffer is written, then count its devices
 * for the progress report and free the buffer. */
static sl_status drain_oldest(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    int i = b->oldest;
    pthread_mutex_lock(&b->lock);
    while (b->state[i] != BUF_WRITTEN)
        pthread_cond_wait(&b->changed, &b->lock);
    pthread_mutex_unlock(&b->lock);
    fit_batch *done = &b->buf[i];
    sl_status st = done->write_status;
    if (st != SL_OK && !b->reported) /* the first failure says what went wrong */
        take_messages(c->diag, done->diag);
    b->reported |= st != SL_OK;
    if (st == SL_OK)
        st = reject_left_out(c, done);
    sl_diag_clear(done->diag);
    if (st == SL_OK)
        c->summary->devices += (long)done->n_items; /* exact once the import ends */
    for (size_t k = 0; st == SL_OK && k < done->n_items; k++)
        if (!done->items[k].rejected)
            count_item(c, &done->items[k]);
    sl__fit_batch_clear(done);
    set_state(b, i, BUF_FREE);
    b->oldest = (i + 1) % SL_INGEST_BUFFERS;
    b->in_flight--;
    sl__ingest_progress(c);
    return st;
}

/* Every submitted buffer written and accounted for (all of them, even after
 * an error: nothing may be written once the caller rolls back). */
static sl_status drain_all(ingest_ctx *c)
{
    sl_status st = SL_OK;
    while (c->batch->in_flight > 0) {
        sl_status one = drain_oldest(c);
        if (st == SL_OK)
            st = one;
    }
    return st;
}

/* Hand the filled buffer to the pool and go on reading into the next one,
 * once that one is free. On an error the states are left as they are, for
 * drain_all. */
static sl_status rotate(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    if (b->buf[b->filling].n_items == 0)
        return SL_OK;
    if (b->in_flight == 0)
        b->oldest = b->filling;
    set_state(b, b->filling, BUF_SUBMITTED);
    sl_status st = sl__fit_pool_submit(b->pool, &b->buf[b->filling]);
    if (st != SL_OK) { /* never reached the pool: drain reports it */
        b->buf[b->filling].write_status = st;
        set_state(b, b->filling, BUF_WRITTEN);
    }
    b->in_flight++;
    b->filling = (b->filling + 1) % SL_INGEST_BUFFERS;
    while (state_of(b, b->filling) != BUF_FREE) {
        sl_status drained = drain_oldest(c);
        if (drained != SL_OK)
            return drained;
    }
    set_state(b, b->filling, BUF_FILLING);
    return st;
}

/* ---- runs: consecutive rows of one device ---- */

static sl_status end_run(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    if (!b->in_run)
        return SL_OK;
    b->in_run = 0;
    fit_batch *f = &b->buf[b->filling];
    if (b->run_bad) {
        b->run_bad = b->run_identity_bad = 0;
        f->n_points = b->run_offset; /* none of its points is kept */
        return sl__ingest_reject_kept(c, b->run_reason);
    }
    sl_status st = SL_OK;
    const sl_fit_config *cfg = sl__ingest_fit_for(c, b->run_wafer_index,
                                              c->plan->temperatures_K[b->run_temperature], &st);
    if (!cfg)
        return st;
    size_t n = f->n_points - b->run_offset;
    fit_item item = { .offset = b->run_offset, .n = n, .cfg = *cfg,
                      .has_direction = b->has_direction,
                      .overflow = b->run_overflow, .compliance = b->run_compliance,
                      .device_type = b->run_type, .channel_length_um = b->run_length_um,
                      .channel_width_um = b->run_width_um,
                      .run_id = c->run_ids[b->run_temperature], .die_x = b->run_x,
                      .die_y = b->run_y, .first_line = b->run_first_line,
                      .drain_bias_V = b->run_drain_V };
    /* the gate and temperature's, with the device's own channel */
    item.cfg.length_over_width = b->run_cfg.length_over_width;
    /* an open device reads the overflow code most of the time: it is open,
     * not a sweep too short to fit */
    item.open_by_overflow = n < SL_FIT_MIN_POINTS && b->run_overflow > 0 &&
                            n + (size_t)b->run_overflow >= SL_FIT_MIN_POINTS;
    snprintf(item.wafer, sizeof item.wafer, "%s", b->run_wafer);
    snprintf(item.name, sizeof item.name, "%s", b->run_name);
    /* its rows stay with it until stored: the store may still refuse it */
    int fail = c->rejects && sl__fit_batch_push_text(f, &item, c->reject_buf, c->reject_len) != 0;
    sl__ingest_forget_kept(c);
    if (fail || sl__fit_batch_push(f, &item) != 0)
        return SL_ENOMEM;
    return f->n_items >= SL_INGEST_BATCH_DEVICES ? rotate(c) : SL_OK;
}

/* A row of the run's device written differently ("1" vs "1.0"). */
static sl_status check_same_die(ingest_ctx *c, const ingest_row *row)
{
    const ingest_batch *b = c->batch;
    if (b->run_x == row->die_x && b->run_y == row->die_y)
        return SL_OK;
    const long here[2] = { row->die_x, row->die_y }, before[2] = { b->run_x, b->run_y };
    return die_moved(c, c->diag, sl_rowsrc_line(c->src), row->device, row->wafer, here, before,
                     b->run_first_line);
}

/* Keep a field of the run's first row for the fast comparison; a text too
 * long for the buffer gets a length no field can match, so every row of such
 * a run takes the checked path. */
static size_t remember(char *dst, size_t size, const char *text)
{
    size_t n = strlen(text);
    snprintf(dst, size, "%s", text);
    return n < size ? n : (size_t)-1;
}

/* A run's identity as written, for the fast comparison of the rows after. */
static void remember_identity(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    b->in_run = 1;
    b->run_first_line = sl_rowsrc_line(c->src);
    b->run_offset = b->buf[b->filling].n_points;
    b->run_overflow = b->run_compliance = 0;
    b->run_drain_V = b->by_current ? -1.0 : NAN;
    b->run_wafer_len = remember(b->run_wafer, sizeof b->run_wafer,
                                sl_rowsrc_field(c->src, SL_ROW_WAFER, NULL));
    b->run_name_len = remember(b->run_name, sizeof b->run_name,
                               sl_rowsrc_field(c->src, SL_ROW_DEVICE, NULL));
    b->run_die_x_len = remember(b->run_die_x, sizeof b->run_die_x,
                                sl_rowsrc_field(c->src, SL_ROW_DIE_X, NULL));
    b->run_die_y_len = remember(b->run_die_y, sizeof b->run_die_y,
                                sl_rowsrc_field(c->src, SL_ROW_DIE_Y, NULL));
    b->run_t_len = remember(b->run_t, sizeof b->run_t,
                            sl_rowsrc_field(c->src, SL_ROW_TEMPERATURE, NULL));
    const char *texts[5] = { b->run_name, b->run_wafer, b->run_die_x, b->run_die_y, b->run_t };
    for (size_t k = 0; k < 5; k++) {
        b->run_word[k] = 0;
        for (size_t i = 0; i < 8 && texts[k][i]; i++)
            b->run_word[k] |= (uint64_t)(unsigned char)texts[k][i] << (8u * i);
    }
}

static sl_status start_run(ingest_ctx *c, const ingest_row *row)
{
    ingest_batch *b = c->batch;
    remember_identity(c);
    b->run_x = row->die_x;
    b->run_y = row->die_y;
    b->run_wafer_index = row->wafer_index;
    b->run_temperature = row->temperature;
    sl__ingest_device_fit(c, &b->run_cfg, row);
    sl__ingest_row_geometry(c, row, &b->run_type, &b->run_length_um, &b->run_width_um);
    return SL_OK;
}

/* Same device as the run, with the same die text: the fast path of a row.
 * Names and die indices are a few bytes: their first 8 compared as one
 * word, the rest (rare) byte by byte. */
static bool field_is(const ingest_ctx *c, sl_row_quantity q, uint64_t word, const char *text,
                     size_t len)
{
    size_t n;
    if (sl_rowsrc_field_word(c->src, q, &n) != word || n != len)
        return false;
    if (n <= 8)
        return true;
    const char *f = sl_rowsrc_field(c->src, q, NULL);
    for (size_t i = 8; i < n; i++)
        if (f[i] != text[i])
            return false;
    return true;
}

static bool continues_run(const ingest_ctx *c)
{
    const ingest_batch *b = c->batch;
    const uint64_t *w = b->run_word;
    return b->in_run && field_is(c, SL_ROW_DEVICE, w[0], b->run_name, b->run_name_len) &&
           field_is(c, SL_ROW_WAFER, w[1], b->run_wafer, b->run_wafer_len) &&
           field_is(c, SL_ROW_DIE_X, w[2], b->run_die_x, b->run_die_x_len) &&
           field_is(c, SL_ROW_DIE_Y, w[3], b->run_die_y, b->run_die_y_len) &&
           field_is(c, SL_ROW_TEMPERATURE, w[4], b->run_t, b->run_t_len);
}

/* A problem in the run's rows (its message is in c->diag): the device is
 * rejected, its points dropped; the row is kept for the rejects file. */
static sl_status run_problem(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    if (!b->run_bad) {
        b->run_bad = 1;
        snprintf(b->run_reason, sizeof b->run_reason, "%s", sl__ingest_current_reason(c));
        b->buf[b->filling].n_points = b->run_offset;
    }
    sl_status st = sl__ingest_keep_row(c);
    sl__ingest_flush_errors(c);
    return st;
}

/* One point into the batch, in SI; overflow and compliance points are
 * counted and left out. */
static sl_status read_point(ingest_ctx *c, fit_batch *f)
{
    ingest_batch *b = c->batch;
    double vg, r, id, vd;
    sl_status st = sl_rowsrc_number(&vg, c->src, SL_ROW_VG, c->diag);
    if (st != SL_OK)
        return st;
    bool overflow = fabs(vg) >= b->overflow_vg; /* sl_rowsrc_is_overflow, inlined */
    if (b->by_current) {
        st = sl_rowsrc_number(&id, c->src, SL_ROW_ID, c->diag);
        if (st == SL_OK)
            st = sl_rowsrc_number_repeated(&vd, c->src, SL_ROW_VD, c->diag);
        if (st != SL_OK)
            return st;
        overflow |= fabs(id) >= b->overflow_id || fabs(vd) >= b->overflow_vd;
        /* R = V_d / I_d; the sign of a current depends on the meter's
         * convention, the channel's resistance does not (common practice) */
        r = fabs(vd / id);
        if (fabs(vd) != b->run_drain_V && !overflow)
            b->run_drain_V = b->run_drain_V < 0.0 ? fabs(vd) : NAN;
    } else {
        st = sl_rowsrc_number(&r, c->src, SL_ROW_R, c->diag);
        if (st != SL_OK)
            return st;
        overflow |= fabs(r) >= b->overflow_r;
    }
    int dir = 0;
    bool at_compliance = false;
    if (b->has_compliance && (st = sl_rowsrc_flag(&at_compliance, c->src, SL_ROW_COMPLIANCE,
                                                  c->diag)) != SL_OK)
        return st;
    if (b->has_direction && (st = sl_rowsrc_direction(&dir, c->src, c->diag)) != SL_OK)
        return st;
    if (at_compliance || overflow) {
        b->run_compliance += at_compliance;
        b->run_overflow += !at_compliance;
        return SL_OK;
    }
    size_t k = f->n_points++;
    f->vg[k] = vg;
    f->r[k] = r;
    f->dir[k] = (signed char)dir;
    return SL_OK;
}

/* A row whose identity does not read: the rows after it with the same text
 * belong to the same rejected device. */
static sl_status identity_problem(ingest_ctx *c)
{
    sl_status st = end_run(c);
    if (st != SL_OK)
        return st;
    remember_identity(c);
    c->batch->run_identity_bad = 1;
    return run_problem(c);
}

/* The first row of a run, or a row of the run's device written differently;
 * *reported when the row had a problem (reported and kept already). */
static sl_status next_row_of_run(ingest_ctx *c, bool *reported)
{
    ingest_batch *b = c->batch;
    ingest_row row;
    *reported = false;
    sl_status st = sl__ingest_read_row(c, &row);
    if (st == SL_EINPUT) {
        *reported = true;
        return identity_problem(c);
    }
    if (st != SL_OK)
        return st;
    /* the same device at another temperature is a run of its own */
    if (b->in_run && !b->run_identity_bad && strcmp(row.device, b->run_name) == 0 &&
        strcmp(row.wafer, b->run_wafer) == 0 && row.temperature == b->run_temperature) {
        if (b->run_bad)
            return SL_OK; /* rejected already: one message for the device */
        st = check_same_die(c, &row);
        *reported = st == SL_EINPUT;
        return *reported ? run_problem(c) : st;
    }
    st = end_run(c);
    return st == SL_OK ? start_run(c, &row) : st;
}

static sl_status sweep_row(ingest_ctx *c)
{
    ingest_batch *b = c->batch;
    if (!continues_run(c)) {
        bool reported = false;
        sl_status st = next_row_of_run(c, &reported);
        if (st != SL_OK || reported)
            return st;
    }
    if (b->run_identity_bad)
        return sl__ingest_keep_row(c);
    c->run_rows[b->run_temperature]++;
    fit_batch *f = &b->buf[b->filling];
    if (!b->run_bad && f->n_points - b->run_offset >= SL_INGEST_MAX_POINTS) {
        sl__ingest_error_at_row(c, -1, "device '%s' has more than %d points", b->run_name,
                            SL_INGEST_MAX_POINTS);
        return run_problem(c);
    }
    if (f->n_points + 1 > f->cap_points && sl__fit_batch_reserve_points(f, f->n_points + 1) != 0)
        return SL_ENOMEM;
    sl_status st = read_point(c, f);
    if (st == SL_EINPUT)
        return run_problem(c);
    if (st != SL_OK)
        return st;
    if (b->run_bad)
        f->n_points = b->run_offset; /* its values are checked, never kept */
    return c->rejects ? sl__ingest_keep_row(c) : SL_OK; /* for the rejects file, if any */
}

/* ---- devices with rows in several places or too few points so far ---- */

/* The stored sweep of a device followed by its staged rows, in file order. */
static sl_status gather_points(ingest_ctx *c, double **vg, double **r, size_t *n, long device_id)
{
    double *vg0 = NULL, *r0 = NULL, *vg1 = NULL, *r1 = NULL;
    size_t n0 = 0, n1 = 0;
    sl_status st = sl_store_load_sweep(c->store, &vg0, &r0, &n0, device_id, c->diag);
    if (st == SL_OK)
        st = sl_store_staged_points(c->store, &vg1, &r1, &n1, device_id, c->diag);
    if (st == SL_OK) {
        *vg = realloc(vg0, (n0 + n1 + 1) * sizeof **vg);
        *r = *vg ? realloc(r0, (n0 + n1 + 1) * sizeof **r) : NULL;
        if (!*vg || !*r) {
            free(*vg ? *vg : vg0);
            free(*r ? *r : r0);
            st = SL_ENOMEM;
        } else {
            if (n1) { /* vg1 is NULL without staged rows: no memcpy from NULL */
                memcpy(*vg + n0, vg1, n1 * sizeof **vg);
                memcpy(*r + n0, r1, n1 * sizeof **r);
            }
            *n = n0 + n1;
        }
    } else {
        free(vg0);
        free(r0);
    }
    free(vg1);
    free(r1);
    return st;
}

/* A device met again is fitted at its run's temperature, with the
 * import's density model. */
static const sl_fit_config *wafer_fit(ingest_ctx *c, const char *wafer, long run_id,
                                      sl_status *status)
{
    *status = SL_OK;
    long w = sl__ingest_wafer_index(c, wafer);
    if (w < 0 || c->wafers[w].split < 0)
        return NULL;
    double temperature_K = NAN;
    for (size_t t = 0; t < c->plan->n_temperatures; t++)
        if (c->run_ids[t] == run_id)
            temperature_K = c->plan->temperatures_K[t];
    return sl__ingest_fit_for(c, (size_t)w, temperature_K, status);
}

/* Why the gathered points of a device cannot be fitted, or SL_OK. */
static sl_status check_gathered(ingest_ctx *c, const sl_store_import_device *d, size_t n)
{
    if (n < SL_FIT_MIN_POINTS) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, d->source_line, 0,
                    "device '%s' on wafer '%s' has %zu points; a sweep needs at least %d",
                    d->name, d->wafer, n, SL_FIT_MIN_POINTS);
        return SL_EINPUT;
    }
    if (n > SL_INGEST_MAX_POINTS) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, d->source_line, 0,
                    "device '%s' has more than %d points", d->name, SL_INGEST_MAX_POINTS);
        return SL_EINPUT;
    }
    return SL_OK;
}

/* The device's own channel and directions, where its later runs were
 * noted (an open device met once has neither: the plan's channel, the turn
 * of the gate). *dir is malloc'd or NULL. */
static sl_status refit_config(ingest_ctx *c, sl_fit_config *cfg, signed char **dir,
                              long *dropped, const sl_store_import_device *d, size_t n)
{
    *dir = NULL;
    double length_over_width = revisited_channel(c->batch, d->id, dropped);
    if (!isnan(length_over_width))
        cfg->length_over_width = length_over_width;
    if (!c->batch->has_direction || n == 0)
        return SL_OK;
    *dir = malloc(n);
    if (!*dir)
        return SL_ENOMEM;
    if (!gathered_directions(c->batch, d->id, *dir, n)) {
        free(*dir); /* not all noted: the turn of the gate decides */
        *dir = NULL;
    }
    return SL_OK;
}

static sl_status refit_device(ingest_ctx *c, const sl_store_import_device *d)
{
    /* rows of the device in several places: the wafer's gate, the device's
     * own channel and directions as its rows gave them */
    sl_status cfg_st;
    const sl_fit_config *wafer_cfg = wafer_fit(c, d->wafer, d->run_id, &cfg_st);
    if (!wafer_cfg && cfg_st != SL_OK)
        return cfg_st;
    if (!wafer_cfg) {
        sl_diag_error(c->diag, "device '%s' is on a wafer this import does not know", d->name);
        return SL_EDB;
    }
    sl_fit_config own = *wafer_cfg;
    const sl_fit_config *cfg = &own;
    double *vg = NULL, *r = NULL;
    signed char *dir = NULL;
    long later_dropped = 0;
    size_t n = 0;
    sl_status st = gather_points(c, &vg, &r, &n, d->id);
    if (st == SL_OK)
        st = check_gathered(c, d, n);
    if (st == SL_OK)
        st = refit_config(c, &own, &dir, &later_dropped, d, n);
    sl_fit_double_result both = { 0 };
    sl_fit_result res = { 0 };
    sl_status fit_st = SL_EINPUT;
    if (st == SL_OK) {
        sl_fit_workspace *ws = sl_fit_workspace_new(n);
        fit_st = ws ? sl_fit_double_sweep(&both, ws, cfg, vg, r, dir, n) : SL_ENOMEM;
        res = both.device;
        sl_fit_workspace_free(ws);
        st = fit_st == SL_ENOMEM ? SL_ENOMEM : SL_OK;
        if (fit_st == SL_EINPUT) {
            /* the fitter refuses it as a sweep (enough finite points, so the
             * gate never moved): an input error like too few points, not a
             * device stored with no class */
            sl_diag_add(c->diag, SL_SEV_ERROR, c->file, d->source_line, 0,
                        "device '%s' on wafer '%s' has no two distinct gate voltages in its "
                        "%zu points; it is not a sweep", d->name, d->wafer, n);
            st = SL_EINPUT;
        }
    }
    if (st == SL_OK) {
        sl_store_device dev;
        sl_store_device_init(&dev);
        dev.vg_V = vg;
        dev.r_ohm = r;
        dev.n_points = n;
        dev.hysteresis_V = both.hysteresis_V;
        dev.points_dropped = d->points_dropped + later_dropped;
        result_to_device(&dev, &res, fit_st, cfg);
        st = sl_store_update_measurement(c->store, d->id, &dev, c->diag);
    }
    free(vg);
    free(r);
    free(dir);
    return st;
}

/* Fit the devices left open (more rows later in the file, or too few in
 * their first run), in file order. */
static sl_status resolve_pending(ingest_ctx *c)
{
    sl_store_import_device *open = NULL;
    size_t n_open = 0;
    sl_status st = sl_store_open_devices(c->store, &open, &n_open, c->first_run_id, c->diag);
    for (size_t k = 0; st == SL_OK && k < n_open; k++)
        st = refit_device(c, &open[k]);
    free(open);
    return st;
}

/* The summary's device and class counts, as the writer counted them: every
 * device was fitted as it was stored. */
static void count_written(ingest_ctx *c)
{
    const ingest_batch *b = c->batch;
    for (int k = 0; k < SL_FIT_CLASS_COUNT; k++)
        c->summary->per_class[k] = b->added_class[k];
    c->summary->devices = b->added;
}

/* The summary's device and class counts, from what the import stored, once
 * devices were fitted again at the end. */
static sl_status count_stored(ingest_ctx *c)
{
    const char *names[SL_FIT_CLASS_COUNT];
    long counts[SL_FIT_CLASS_COUNT], total = 0;
    for (int k = 0; k < SL_FIT_CLASS_COUNT; k++)
        names[k] = sl_fit_class_name((sl_fit_class)k);
    sl_status st = sl_store_count_classes(c->store, counts, names, SL_FIT_CLASS_COUNT, &total,
                                          c->first_run_id, c->diag);
    if (st != SL_OK)
        return st;
    for (int k = 0; k < SL_FIT_CLASS_COUNT; k++)
        c->summary->per_class[k] = counts[k];
    c->summary->devices = total;
    return SL_OK;
}

sl_status sl__ingest_sweeps(ingest_ctx *c)
{
    if (!batch_new(c, c->opt->threads))
        return SL_ENOMEM;
    ingest_batch *b = c->batch;
    b->by_current = !sl_rowsrc_has(c->src, SL_ROW_R);
    b->overflow_vg = sl_rowsrc_overflow_si(c->src, SL_ROW_VG);
    b->overflow_r = sl_rowsrc_overflow_si(c->src, SL_ROW_R);
    b->overflow_id = sl_rowsrc_overflow_si(c->src, SL_ROW_ID);
    b->overflow_vd = sl_rowsrc_overflow_si(c->src, SL_ROW_VD);
    b->has_direction = sl_rowsrc_has(c->src, SL_ROW_DIRECTION);
    b->has_compliance = sl_rowsrc_has(c->src, SL_ROW_COMPLIANCE);
    bool has = false;
    sl_status st;
    while ((st = sl_rowsrc_next(&has, c->src, c->diag)) == SL_OK && has) {
        c->summary->rows++;
        if ((st = sweep_row(c)) != SL_OK)
            break;
    }
    if (st == SL_OK)
        st = end_run(c);
    if (st == SL_OK)
        st = rotate(c); /* the last, partly filled buffer */
    /* on any failure too, the writer must be done before the caller rolls
     * back: a write after the rollback would land outside the transaction */
    sl_status drained = drain_all(c);
    if (st == SL_OK)
        st = drained;
    if (st != SL_OK)
        return st;
    if (!b->any_open) {
        count_written(c);
        return SL_OK;
    }
    st = resolve_pending(c);
    return st == SL_OK ? count_stored(c) : st;
}
