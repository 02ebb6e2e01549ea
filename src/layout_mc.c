/* SPDX-License-Identifier: MIT
 * Monte-Carlo check of the planner's power (see include/splitlot/layout.h):
 * lots of the layout drawn in memory from the plan's variation block and
 * analysed with the same wafer-level estimator and verdict rule as a
 * measured lot, on worker threads with their own GSL generators.
 */
#include "splitlot/layout.h"

#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "splitlot/stats.h"

#define MAX_THREADS 64

typedef struct {
    const sl_plan *plan;
    const sl_layout *layout;
    const sl_layout_model *model;
    const long *column;      /* per level: its design column, -1 if none */
    size_t lots;             /* this worker's share */
    unsigned long seed;
    size_t *detected, *false_verdict; /* per level */
    size_t analysed;
    sl_status status;
} worker;

/* Buffers of one worker: the kept wafers of a lot. */
typedef struct {
    double *x, *mean, *devices, *ss, *conv, *var, *load_offset;
    double *pool_ss, *pool_df;   /* per dielectric */
    size_t *dielectric;
    long *load;
} lot_buffers;

static void buffers_free(lot_buffers *b)
{
    free(b->x);
    free(b->load);
    free(b->mean);
    free(b->devices);
    free(b->ss);
    free(b->conv);
    free(b->var);
    free(b->pool_ss);
    free(b->pool_df);
    free(b->dielectric);
    free(b->load_offset);
}

static int buffers_alloc(lot_buffers *b, const sl_layout_model *m, size_t n_dielectrics)
{
    size_t n = m->n_obs + 1, L = m->n_loads + 1;
    b->var = malloc(n * sizeof *b->var);
    b->dielectric = malloc(n * sizeof *b->dielectric);
    b->pool_ss = malloc((n_dielectrics + 1) * sizeof *b->pool_ss);
    b->pool_df = malloc((n_dielectrics + 1) * sizeof *b->pool_df);
    if (!b->var || !b->dielectric || !b->pool_ss || !b->pool_df)
        return -1;
    b->x = malloc(n * m->n_coef * sizeof *b->x);
    b->load = malloc(n * (m->n_steps + 1) * sizeof *b->load);
    b->mean = malloc(n * sizeof *b->mean);
    b->devices = malloc(n * sizeof *b->devices);
    b->ss = malloc(n * sizeof *b->ss);
    b->conv = malloc(n * sizeof *b->conv);
    b->load_offset = malloc(L * sizeof *b->load_offset);
    return b->x && b->load && b->mean && b->devices && b->ss && b->conv && b->load_offset ? 0 : -1;
}

/* Draw one lot with every level as planned (true effects 0); returns the
 * wafers with usable devices, filled into b. */
static size_t draw_lot(lot_buffers *b, const worker *w, gsl_rng *rng)
{
    const sl_layout_model *m = w->model;
    const sl_plan_variation *v = &w->plan->variation;
    size_t L = m->n_loads, p = m->n_coef, S = m->n_steps, kept = 0;
    for (size_t k = 0; k < L; k++)
        b->load_offset[k] = gsl_ran_gaussian(rng, v->batch_sigma_per_cm2);
    for (size_t i = 0; i < m->n_obs; i++) {
        unsigned int usable = gsl_ran_binomial(rng, w->plan->expected_yield,
                                               (unsigned int)w->plan->devices_per_wafer);
        double offset = gsl_ran_gaussian(rng, v->wafer_sigma_per_cm2);
        if (usable == 0)
            continue; /* a wafer without usable devices has no mean */
        for (size_t s = 0; s < S; s++)
            if (m->load[i * S + s] >= 0)
                offset += b->load_offset[m->load[i * S + s]];
        double mean_V = gsl_ran_gaussian(rng, v->device_sigma_V / sqrt((double)usable));
        b->ss[kept] = usable > 1 ? v->device_sigma_V * v->device_sigma_V *
                                       gsl_ran_chisq(rng, (double)(usable - 1))
                                 : 0.0;
        b->mean[kept] = offset + m->per_cm2_per_V[i] * mean_V;
        b->devices[kept] = (double)usable;
        b->conv[kept] = m->per_cm2_per_V[i];
        b->dielectric[kept] =
            w->plan->splits[w->layout->wafers[m->wafer[i]].split].dielectric;
        memcpy(b->x + kept * p, m->x + i * p, p * sizeof *b->x);
        if (S)
            memcpy(b->load + kept * S, m->load + i * S, S * sizeof *b->load);
        kept++;
    }
    return kept;
}

/* Each wafer mean's sampling variance as the analysis of a measured lot
 * forms it: the within-wafer variance of neutrality points pooled over the
 * wafers of the same dielectric (the lot's pool when that dielectric has no
 * df, 0 when nothing has), over the wafer's devices, times (C_g / e)^2. */
static void wafer_variances(lot_buffers *b, size_t kept, size_t n_dielectrics)
{
    double lot_ss = 0.0, lot_df = 0.0;
    for (size_t d = 0; d < n_dielectrics; d++)
        b->pool_ss[d] = b->pool_df[d] = 0.0;
    for (size_t i = 0; i < kept; i++) {
        b->pool_ss[b->dielectric[i]] += b->ss[i];
        b->pool_df[b->dielectric[i]] += b->devices[i] - 1.0;
        lot_ss += b->ss[i];
        lot_df += b->devices[i] - 1.0;
    }
    for (size_t i = 0; i < kept; i++) {
        size_t d = b->dielectric[i];
        double s2 = b->pool_df[d] > 0.0 ? b->pool_ss[d] / b->pool_df[d]
                                        : (lot_df > 0.0 ? lot_ss / lot_df : 0.0);
        b->var[i] = b->conv[i] * b->conv[i] * s2 / b->devices[i];
    }
}

/* Judge every level of one analysed lot, as planned and missed by T + shift. */
static void judge_lot(worker *w, const sl_stats_wafer_fit *fit)
{
    double alpha = w->plan->resolve.alpha;
    for (size_t k = 0; k < w->layout->n_levels; k++) {
        const sl_layout_level *lv = &w->layout->levels[k];
        long c = w->column[k];
        if (c < 0)
            continue;
        double d = fit->coef[c], se = fit->se[c], df = fit->df[c], t = lv->tolerance_per_cm2;
        sl_stats_verdict_kind as_planned = sl_stats_verdict(d, se, df, t, alpha);
        sl_stats_verdict_kind missed =
            sl_stats_verdict(d + t + lv->shift_per_cm2, se, df, t, alpha);
        w->false_verdict[k] += as_planned == SL_VERDICT_OFF_PLAN;
        w->detected[k] += missed == SL_VERDICT_OFF_PLAN;
    }
}

static void *run_worker(void *arg)
{
    worker *w = arg;
    lot_buffers b = { 0 };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!rng || buffers_alloc(&b, w->model, w->plan->n_dielectrics) != 0) {
        w->status = SL_ENOMEM;
    } else {
        gsl_rng_set(rng, w->seed);
        const sl_layout_model *m = w->model;
        for (size_t lot = 0; lot < w->lots; lot++) {
            size_t kept = draw_lot(&b, w, rng);
            wafer_variances(&b, kept, w->plan->n_dielectrics);
            sl_stats_wafer_data in = { kept, m->n_coef, m->n_loads, m->n_steps,
                                       b.x,  b.mean,    b.var,      m->n_loads ? b.load : NULL };
            sl_stats_wafer_fit fit;
            w->analysed++;
            /* a lot the analysis cannot fit gives no verdict: it counts as not found */
            if (kept > m->n_coef && sl_stats_wafer_effects(&fit, &in) == SL_OK)
                judge_lot(w, &fit);
        }
    }
    buffers_free(&b);
    gsl_rng_free(rng);
    return NULL;
}

void sl_layout_mc_free(sl_layout_mc *mc)
{
    free(mc->detected);
    free(mc->false_verdict);
    memset(mc, 0, sizeof *mc);
}

/* The design column of each level, -1 when the design has none. */
static long *level_columns(const sl_layout *l, const sl_layout_model *m)
{
    long *column = malloc((l->n_levels + 1) * sizeof *column);
    for (size_t k = 0; column && k < l->n_levels; k++) {
        column[k] = -1;
        for (size_t c = 1; c < m->n_coef; c++)
            if (m->coef_factor[c] == l->levels[k].factor && m->coef_level[c] == l->levels[k].level)
                column[k] = (long)c;
    }
    return column;
}

static sl_status run_workers(worker *w, int threads)
{
    pthread_t id[MAX_THREADS];
    int started = 0;
    sl_status st = SL_OK;
    for (int t = 1; t < threads; t++, started++)
        if (pthread_create(&id[t], NULL, run_worker, &w[t]) != 0) {
            st = SL_EIO;
            break;
        }
    run_worker(&w[0]);
    for (int t = 1; t <= started; t++)
        pthread_join(id[t], NULL);
    for (int t = 0; t < threads && st == SL_OK; t++)
        st = w[t].status;
    return st;
}

sl_status sl_layout_simulate_power(sl_layout_mc *out, const sl_plan *plan, const sl_layout *layout,
                                   size_t n_lots, unsigned long seed, int threads)
{
    memset(out, 0, sizeof *out);
    if (!plan->variation.present || !plan->resolve.present || n_lots == 0 || threads < 1)
        return SL_EINPUT;
    threads = threads > MAX_THREADS ? MAX_THREADS : threads;
    size_t nl = layout->n_levels;
    sl_layout_model m = { 0 };
    sl_status st = sl_layout_model_build(&m, plan, layout, (double)plan->devices_per_wafer);
    if (st == SL_OK && m.n_coef > SL_STATS_MAX_COEF)
        st = SL_EINPUT;
    long *column = st == SL_OK ? level_columns(layout, &m) : NULL;
    worker *w = calloc((size_t)threads, sizeof *w);
    size_t *counts = calloc(2 * nl * (size_t)threads + 1, sizeof *counts);
    if (st == SL_OK && (!column || !w || !counts))
        st = SL_ENOMEM;
    for (int t = 0; st == SL_OK && t < threads; t++) {
        size_t share = n_lots / (size_t)threads + ((size_t)t < n_lots % (size_t)threads);
        w[t] = (worker){ plan, layout, &m, column, share, seed * 1000003ul + (unsigned long)t + 1,
                         counts + 2 * nl * (size_t)t, counts + 2 * nl * (size_t)t + nl, 0, SL_OK };
    }
    if (st == SL_OK)
        st = run_workers(w, threads);
    out->detected = calloc(nl + 1, sizeof *out->detected);
    out->false_verdict = calloc(nl + 1, sizeof *out->false_verdict);
    if (st == SL_OK && (!out->detected || !out->false_verdict))
        st = SL_ENOMEM;
    for (int t = 0; st == SL_OK && t < threads; t++) {
        out->lots += w[t].analysed;
        for (size_t k = 0; k < nl; k++) {
            out->detected[k] += (double)w[t].detected[k];
            out->false_verdict[k] += (double)w[t].false_verdict[k];
        }
    }
    for (size_t k = 0; st == SL_OK && k < nl; k++) {
        out->detected[k] /= (double)out->lots;
        out->false_verdict[k] /= (double)out->lots;
    }
    out->n_levels = nl;
    free(counts);
    free(w);
    free(column);
    sl_layout_model_free(&m);
    if (st != SL_OK)
        sl_layout_mc_free(out);
    return st;
}
