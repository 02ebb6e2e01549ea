/* SPDX-License-Identifier: MIT
 * Wafer assignment and processing order, randomised from the plan's seed with
 * GSL's Mersenne Twister so a layout can be rebuilt anywhere, and the devices
 * needed per split from the normal/Student-t sample-size formula (GSL cdf).
 */
#include "splitlot/layout.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_SAMPLE_SIZE 1.0e9
#define MAX_REFINEMENTS 100

/* ---- sample size ---- */

static double devices_for(double quantile_sum, double shift_V, double sigma_V)
{
    double r = sigma_V / shift_V;
    return 2.0 * r * r * quantile_sum * quantile_sum;
}

static sl_status round_up(size_t *n_out, double n)
{
    if (!(n <= MAX_SAMPLE_SIZE))
        return SL_ENUM;
    *n_out = n < 2.0 ? 2 : (size_t)ceil(n);
    return SL_OK;
}

sl_status sl_layout_sample_size(size_t *n_out, double shift_V, double sigma_V, double alpha,
                                double power)
{
    *n_out = 0;
    if (!(shift_V > 0.0) || !(sigma_V > 0.0) || !(alpha > 0.0 && alpha < 1.0) ||
        !(power > 0.0 && power < 1.0) || !isfinite(shift_V) || !isfinite(sigma_V))
        return SL_EINPUT;
    double z = gsl_cdf_ugaussian_Pinv(1.0 - alpha / 2.0) + gsl_cdf_ugaussian_Pinv(power);
    size_t n = 0, before = 0;
    if (round_up(&n, devices_for(z, shift_V, sigma_V)) != SL_OK)
        return SL_ENUM;
    for (int i = 0; i < MAX_REFINEMENTS; i++) {
        double df = 2.0 * ((double)n - 1.0);
        double t = gsl_cdf_tdist_Pinv(1.0 - alpha / 2.0, df) + gsl_cdf_tdist_Pinv(power, df);
        size_t next = 0;
        if (round_up(&next, devices_for(t, shift_V, sigma_V)) != SL_OK)
            return SL_ENUM;
        if (next == n || next == before) {
            /* settled, or rounding flips between two values: keep the larger */
            *n_out = next > n ? next : n;
            return SL_OK;
        }
        before = n;
        n = next;
    }
    return SL_ENUM;
}

/* ---- layout ---- */

void sl_layout_free(sl_layout *layout)
{
    if (!layout)
        return;
    for (size_t i = 0; i < layout->n_wafers; i++)
        free(layout->wafers[i].wafer);
    for (size_t i = 0; i < layout->n_splits; i++)
        free(layout->splits[i].wafers);
    free(layout->wafers);
    free(layout->splits);
    free(layout);
}

static char *copy_text(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

static sl_layout *layout_new(const sl_plan *plan)
{
    sl_layout *l = calloc(1, sizeof *l);
    if (!l)
        return NULL;
    l->wafers = calloc(plan->n_wafers ? plan->n_wafers : 1, sizeof *l->wafers);
    l->splits = calloc(plan->n_splits ? plan->n_splits : 1, sizeof *l->splits);
    if (!l->wafers || !l->splits) {
        sl_layout_free(l);
        return NULL;
    }
    for (size_t i = 0; i < plan->n_splits; i++, l->n_splits++) {
        size_t cap = plan->design_kind == SL_DESIGN_EXPLICIT ? plan->splits[i].n_wafers
                                                             : (size_t)plan->wafers_per_split;
        l->splits[i].wafers = calloc(cap ? cap : 1, sizeof(size_t));
        if (!l->splits[i].wafers) {
            sl_layout_free(l);
            return NULL;
        }
    }
    for (size_t i = 0; i < plan->n_wafers; i++, l->n_wafers++) {
        l->wafers[i].split = -1;
        l->wafers[i].wafer = copy_text(plan->wafers[i]);
        if (!l->wafers[i].wafer) {
            sl_layout_free(l);
            return NULL;
        }
    }
    return l;
}

static void assign(sl_layout *l, size_t wafer, size_t split)
{
    l->wafers[wafer].split = (long)split;
    l->splits[split].wafers[l->splits[split].n_wafers++] = wafer;
}

static int compare_index(const void *a, const void *b)
{
    size_t x = *(const size_t *)a, y = *(const size_t *)b;
    return (x > y) - (x < y);
}

/* Deal shuffled wafers wafers_per_split at a time; the rest stay spares. */
static sl_status deal_factorial(sl_layout *l, const sl_plan *plan, gsl_rng *rng, sl_diag *diag)
{
    size_t per = (size_t)plan->wafers_per_split;
    if (plan->wafers_per_split < 1 || plan->n_splits * per > plan->n_wafers) {
        sl_diag_error(diag, "plan '%s': %zu wafers cannot fill %zu splits x %ld wafers",
                      plan->path, plan->n_wafers, plan->n_splits, plan->wafers_per_split);
        return SL_EINPUT;
    }
    size_t *order = malloc((plan->n_wafers ? plan->n_wafers : 1) * sizeof *order);
    if (!order)
        return SL_ENOMEM;
    for (size_t i = 0; i < plan->n_wafers; i++)
        order[i] = i;
    gsl_ran_shuffle(rng, order, plan->n_wafers, sizeof *order);
    for (size_t k = 0; k < plan->n_splits * per; k++)
        assign(l, order[k], k / per);
    for (size_t s = 0; s < plan->n_splits; s++) /* list a split's wafers in plan order */
        qsort(l->splits[s].wafers, l->splits[s].n_wafers, sizeof(size_t), compare_index);
    free(order);
    return SL_OK;
}

static sl_status deal_explicit(sl_layout *l, const sl_plan *plan, sl_diag *diag)
{
    for (size_t s = 0; s < plan->n_splits; s++)
        for (size_t j = 0; j < plan->splits[s].n_wafers; j++) {
            long w = sl_plan_wafer_index(plan, plan->splits[s].wafers[j]);
            if (w < 0 || l->wafers[w].split >= 0) {
                sl_diag_error(diag, "plan '%s': wafer '%s' of split '%s' is unknown or taken",
                              plan->path, plan->splits[s].wafers[j], plan->splits[s].name);
                return SL_EINPUT;
            }
            assign(l, (size_t)w, s);
        }
    return SL_OK;
}

/* A random permutation of the assigned wafers, in the order of plan->wafers. */
static sl_status order_processing(sl_layout *l, gsl_rng *rng)
{
    size_t *assigned = malloc((l->n_wafers ? l->n_wafers : 1) * sizeof *assigned);
    if (!assigned)
        return SL_ENOMEM;
    size_t n = 0;
    for (size_t i = 0; i < l->n_wafers; i++)
        if (l->wafers[i].split >= 0)
            assigned[n++] = i;
    gsl_ran_shuffle(rng, assigned, n, sizeof *assigned);
    for (size_t k = 0; k < n; k++)
        l->wafers[assigned[k]].process_order = k + 1;
    free(assigned);
    return SL_OK;
}

static sl_status count_devices(sl_layout *l, const sl_plan *plan, sl_diag *diag)
{
    size_t needed = 0;
    if (plan->resolve.present) {
        const sl_plan_resolve *r = &plan->resolve;
        sl_status st = sl_layout_sample_size(&needed, r->shift_V, r->device_sigma_V, r->alpha,
                                             r->power);
        if (st != SL_OK) {
            sl_diag_error(diag, "plan '%s': no sample size for shift %g V, sigma %g V (%s)",
                          plan->path, r->shift_V, r->device_sigma_V, sl_status_str(st));
            return st;
        }
    }
    for (size_t s = 0; s < l->n_splits; s++) {
        sl_layout_split *sp = &l->splits[s];
        sp->devices_needed = needed;
        sp->devices_available =
            (double)sp->n_wafers * (double)plan->devices_per_wafer * plan->expected_yield;
        if (!plan->resolve.present)
            sp->verdict = SL_LAYOUT_NOT_ASKED;
        else
            sp->verdict = sp->devices_available >= (double)needed ? SL_LAYOUT_ENOUGH
                                                                  : SL_LAYOUT_TOO_FEW;
    }
    return SL_OK;
}

sl_status sl_layout_build(sl_layout **out, const sl_plan *plan, sl_diag *diag)
{
    *out = NULL;
    sl_layout *l = layout_new(plan);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    sl_status st = (l && rng) ? SL_OK : SL_ENOMEM;
    if (st == SL_OK) {
        /* only the low 32 bits: gsl_rng_set's unsigned long is 32 bits on some systems */
        gsl_rng_set(rng, (unsigned long)(plan->seed & 0xffffffffu));
        st = plan->design_kind == SL_DESIGN_EXPLICIT ? deal_explicit(l, plan, diag)
                                                     : deal_factorial(l, plan, rng, diag);
    }
    if (st == SL_OK)
        st = order_processing(l, rng);
    if (st == SL_OK)
        st = count_devices(l, plan, diag);
    gsl_rng_free(rng);
    if (st != SL_OK) {
        sl_layout_free(l);
        return st;
    }
    *out = l;
    return SL_OK;
}

long sl_layout_split_of_wafer(const sl_layout *layout, const char *wafer)
{
    for (size_t i = 0; layout && wafer && i < layout->n_wafers; i++)
        if (strcmp(layout->wafers[i].wafer, wafer) == 0)
            return layout->wafers[i].split;
    return -1;
}
