/* SPDX-License-Identifier: MIT
 * Wafer assignment, processing order and the loads of batched steps,
 * randomised from the plan's seed with GSL's Mersenne Twister so a layout can
 * be rebuilt anywhere. The power per level is in layout_power.c.
 */
#include "splitlot/layout.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---- layout ---- */

void sl_layout_free(sl_layout *layout)
{
    if (!layout)
        return;
    for (size_t i = 0; i < layout->n_wafers; i++) {
        free(layout->wafers[i].wafer);
        free(layout->wafers[i].load);
    }
    for (size_t i = 0; i < layout->n_splits; i++)
        free(layout->splits[i].wafers);
    for (size_t i = 0; i < layout->n_loads; i++)
        free(layout->loads[i].wafers);
    free(layout->wafers);
    free(layout->splits);
    free(layout->loads);
    free(layout->levels);
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
        if (plan->n_batches)
            l->wafers[i].load = calloc(plan->n_batches, sizeof(size_t));
        if (!l->wafers[i].wafer || (plan->n_batches && !l->wafers[i].load)) {
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

static void count_devices(sl_layout *l, const sl_plan *plan)
{
    for (size_t s = 0; s < l->n_splits; s++)
        l->splits[s].devices_available = (double)l->splits[s].n_wafers *
                                         (double)plan->devices_per_wafer * plan->expected_yield;
}

/* ---- loads of batched steps ---- */

static int split_gets_step(const sl_plan *plan, size_t split, const sl_plan_batch *b)
{
    const sl_plan_split *s = &plan->splits[split];
    if (b->is_dielectric)
        return s->dielectric == b->ref;
    for (size_t i = 0; i < s->n_treatments; i++)
        if (s->treatments[i] == b->ref)
            return 1;
    return 0;
}

/* The step's wafers, split by split in a shuffled split order, each split's
 * wafers shuffled; returns how many. */
static size_t step_wafers(size_t *out, const sl_layout *l, const sl_plan *plan,
                          const sl_plan_batch *b, gsl_rng *rng, size_t *split_order)
{
    size_t n = 0;
    for (size_t s = 0; s < l->n_splits; s++)
        split_order[s] = s;
    gsl_ran_shuffle(rng, split_order, l->n_splits, sizeof *split_order);
    for (size_t k = 0; k < l->n_splits; k++) {
        size_t s = split_order[k];
        if (!split_gets_step(plan, s, b) || l->splits[s].n_wafers == 0)
            continue;
        memcpy(out + n, l->splits[s].wafers, l->splits[s].n_wafers * sizeof *out);
        gsl_ran_shuffle(rng, out + n, l->splits[s].n_wafers, sizeof *out);
        n += l->splits[s].n_wafers;
    }
    return n;
}

/* Deal the step's wafers round-robin to its loads, numbered in a shuffled order. */
static sl_status fill_loads(sl_layout *l, size_t batch, const size_t *wafers, size_t n,
                            size_t n_loads, gsl_rng *rng)
{
    size_t *number = malloc(n_loads * sizeof *number);
    if (!number)
        return SL_ENOMEM;
    for (size_t k = 0; k < n_loads; k++)
        number[k] = k + 1;
    gsl_ran_shuffle(rng, number, n_loads, sizeof *number);
    size_t first = l->n_loads;
    for (size_t k = 0; k < n_loads; k++) {
        sl_layout_load *load = &l->loads[first + number[k] - 1];
        load->batch = batch;
        load->number = number[k];
        load->wafers = malloc((n / n_loads + 1) * sizeof *load->wafers);
        if (!load->wafers) {
            free(number);
            return SL_ENOMEM;
        }
    }
    l->n_loads += n_loads;
    for (size_t i = 0; i < n; i++) {
        sl_layout_load *load = &l->loads[first + number[i % n_loads] - 1];
        load->wafers[load->n_wafers++] = wafers[i];
        l->wafers[wafers[i]].load[batch] = load->number;
    }
    for (size_t k = 0; k < n_loads; k++) /* a load's wafers in plan order */
        qsort(l->loads[first + k].wafers, l->loads[first + k].n_wafers, sizeof(size_t),
              compare_index);
    free(number);
    return SL_OK;
}

static sl_status assign_loads(sl_layout *l, const sl_plan *plan, gsl_rng *rng)
{
    if (plan->n_batches == 0)
        return SL_OK;
    size_t *wafers = malloc((l->n_wafers + 1) * sizeof *wafers);
    size_t *order = malloc((l->n_splits + 1) * sizeof *order);
    l->loads = calloc(plan->n_batches * (l->n_wafers + 1), sizeof *l->loads);
    sl_status st = wafers && order && l->loads ? SL_OK : SL_ENOMEM;
    for (size_t b = 0; st == SL_OK && b < plan->n_batches; b++) {
        size_t n = step_wafers(wafers, l, plan, &plan->batches[b], rng, order);
        size_t cap = (size_t)plan->batches[b].capacity;
        if (n > 0)
            st = fill_loads(l, b, wafers, n, (n + cap - 1) / cap, rng);
    }
    free(wafers);
    free(order);
    return st;
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
        st = assign_loads(l, plan, rng);
    if (st == SL_OK) {
        count_devices(l, plan);
        st = sl_layout_power(l, plan);
        if (st == SL_ENUM)
            sl_diag_error(diag, "plan '%s': the design cannot estimate every level apart",
                          plan->path);
        else if (st != SL_OK)
            sl_diag_error(diag, "plan '%s': no power per level (%s)", plan->path,
                          sl_status_str(st));
    }
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
