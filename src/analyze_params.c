/* SPDX-License-Identifier: MIT
 * Per split, the median and robust spread of the fitted mobility, residual
 * density n0 and hysteresis over the split's usable devices, found in passes
 * over the kept devices (a range, then exact medians, then exact MADs with
 * sl_stats_median_search), holding three searches per split and nothing per
 * device; and the modified z of a device's mobility within its split.
 */
#include <math.h>
#include <stdlib.h>

#include "analyze_internal.h"

/* 1 / Phi^-1(0.75): the MAD of a normal sample times this estimates its
 * sigma (Rousseeuw and Croux, 1993, JASA 88:1273, the constant b). */
#define MAD_TO_SIGMA 1.482602218505602

typedef enum { PASS_RANGE, PASS_MEDIAN, PASS_MAD } param_pass;

static void visit(analyze_param_state *p, param_pass pass, double x)
{
    switch (pass) {
    case PASS_RANGE:
        p->min = p->n ? fmin(p->min, x) : x;
        p->max = p->n ? fmax(p->max, x) : x;
        p->n++;
        break;
    case PASS_MEDIAN:
        if (p->search)
            sl_stats_median_search_add(p->search, x);
        break;
    case PASS_MAD:
        if (p->search)
            sl_stats_median_search_add(p->search, fabs(x - p->median));
        if (p->first_mad_pass)
            p->sum_abs += fabs(x - p->median);
        break;
    }
}

/* One pass over the kept usable devices: each one's parameters (in the order of
 * the SL_ANALYZE_PARAM_ indices) visited. */
static sl_status one_pass(analyze_param_state *state, size_t n_splits, sl_store_scratch *scratch,
                          param_pass pass, sl_diag *diag)
{
    double x[SL_ANALYZE_N_PARAMS];
    long split;
    int more;
    sl_status st;
    while ((st = sl_store_scratch_next_params(scratch, &more, &split, x, diag)) == SL_OK && more) {
        if (split < 0 || (size_t)split >= n_splits)
            continue;
        for (int q = 0; q < SL_ANALYZE_N_PARAMS; q++)
            if (isfinite(x[q]))
                visit(&state[(size_t)split * SL_ANALYZE_N_PARAMS + (size_t)q], pass, x[q]);
    }
    return st;
}

/* Passes until every search is done; result to median (PASS_MEDIAN) or mad. */
static sl_status search_all(analyze_param_state *state, size_t n_splits, sl_store_scratch *scratch,
                            param_pass pass, sl_diag *diag)
{
    size_t n = n_splits * SL_ANALYZE_N_PARAMS;
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        analyze_param_state *p = &state[i];
        double lo = pass == PASS_MEDIAN ? p->min : 0.0;
        double hi = pass == PASS_MEDIAN ? p->max : fmax(p->max - p->median, p->median - p->min);
        p->first_mad_pass = pass == PASS_MAD;
        if (p->n)
            st = sl_stats_median_search_new(&p->search, p->n, lo, hi);
    }
    for (int open = 1; st == SL_OK && open;) {
        st = one_pass(state, n_splits, scratch, pass, diag);
        open = 0;
        for (size_t i = 0; st == SL_OK && i < n; i++) {
            analyze_param_state *p = &state[i];
            int done = 1;
            p->first_mad_pass = 0;
            if (p->search)
                st = sl_stats_median_search_end_pass(p->search, &done,
                                                     pass == PASS_MEDIAN ? &p->median : &p->mad);
            open |= !done;
        }
    }
    for (size_t i = 0; i < n; i++) {
        sl_stats_median_search_free(state[i].search);
        state[i].search = NULL;
    }
    return st;
}

/* The split's public fields from its state. */
static void publish(sl_analyze_split *sp, const analyze_param_state *p)
{
    double *median[SL_ANALYZE_N_PARAMS] = { &sp->mobility_median_cm2_per_Vs, &sp->n0_median_per_cm2,
                                            &sp->hysteresis_median_V };
    double *spread[SL_ANALYZE_N_PARAMS] = { &sp->mobility_spread_cm2_per_Vs, &sp->n0_spread_per_cm2,
                                            &sp->hysteresis_spread_V };
    for (int q = 0; q < SL_ANALYZE_N_PARAMS; q++) {
        *median[q] = p[q].n ? p[q].median : NAN;
        *spread[q] = p[q].n ? MAD_TO_SIGMA * p[q].mad : NAN;
    }
}

/* The split's median mobility against its dielectric's expected one. */
static void judge_mobility(sl_analysis *a, size_t k)
{
    sl_analyze_split *sp = &a->splits[k];
    const sl_plan_dielectric *d = &a->plan->dielectrics[a->plan->splits[k].dielectric];
    sp->mobility_expected_cm2_per_Vs = sp->mobility_expected_sigma_cm2_per_Vs = NAN;
    sp->mobility_off_plan = -1;
    if (!d->has_mobility)
        return;
    sp->mobility_expected_cm2_per_Vs = d->mobility_cm2_per_Vs.val;
    sp->mobility_expected_sigma_cm2_per_Vs = d->mobility_cm2_per_Vs.sigma;
    if (isnan(sp->mobility_median_cm2_per_Vs))
        return;
    double half = SL_ANALYZE_MOBILITY_SIGMAS * d->mobility_cm2_per_Vs.sigma;
    double miss = sp->mobility_median_cm2_per_Vs - d->mobility_cm2_per_Vs.val;
    sp->mobility_off_plan = fabs(miss) > half;
    a->n_splits_mobility_off += (size_t)sp->mobility_off_plan;
}

sl_status sl__analyze_split_params(analyze_param_state *state, sl_analysis *a,
                               sl_store_scratch *scratch, sl_diag *diag)
{
    size_t ns = a->n_splits;
    sl_store_scratch_params_class(scratch, "ok");
    sl_status st = one_pass(state, ns, scratch, PASS_RANGE, diag);
    if (st == SL_OK)
        st = search_all(state, ns, scratch, PASS_MEDIAN, diag);
    if (st == SL_OK)
        st = search_all(state, ns, scratch, PASS_MAD, diag);
    if (st == SL_EINPUT)
        return sl__analyze_lot_changed(a, diag);
    if (st != SL_OK)
        return st;
    for (size_t s = 0; s < ns; s++) {
        analyze_param_state *p = &state[s * SL_ANALYZE_N_PARAMS];
        for (int q = 0; q < SL_ANALYZE_N_PARAMS; q++)
            if (p[q].n)
                sl_stats_robust_from(&p[q].robust, p[q].n, p[q].median, p[q].mad,
                                     p[q].sum_abs / (double)p[q].n);
        publish(&a->splits[s], p);
        judge_mobility(a, s);
    }
    return SL_OK;
}

double sl__analyze_mobility_modified_z(const analyze_param_state *state, long split,
                                       double mobility)
{
    const analyze_param_state *p = &state[(size_t)split * SL_ANALYZE_N_PARAMS];
    if (!isfinite(mobility) || p->n < SL_ANALYZE_MIN_FOR_OUTLIERS)
        return NAN;
    return sl_stats_modified_z_of(&p->robust, mobility);
}
