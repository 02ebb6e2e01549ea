/* SPDX-License-Identifier: MIT
 * Per split, the median and robust spread of the fitted mobility, residual
 * density n0 and hysteresis over the split's usable devices, found in the
 * analysis' passes over the kept values (a range, then exact medians, then
 * exact MADs with sl_stats_median_search), holding three searches per split
 * and nothing per device; and the modified z of a device's mobility within
 * its split.
 */
#include <math.h>
#include <stdlib.h>

#include "analyze_internal.h"

/* 1 / Phi^-1(0.75): the MAD of a normal sample times this estimates its
 * sigma (Rousseeuw and Croux, 1993, JASA 88:1273, the constant b). */
#define MAD_TO_SIGMA 1.482602218505602

void sl__analyze_params_visit(analyze_param_state *state, size_t n_splits, analyze_pass pass,
                              const sl_store_scratch_value *v)
{
    if (v->tag < 0 || (size_t)v->tag >= n_splits)
        return;
    const double x[SL_ANALYZE_N_PARAMS] = { v->mobility_cm2_per_Vs, v->n0_per_cm2,
                                            v->hysteresis_V };
    analyze_param_state *split = &state[(size_t)v->tag * SL_ANALYZE_N_PARAMS];
    for (int q = 0; q < SL_ANALYZE_N_PARAMS; q++) {
        analyze_param_state *p = &split[q];
        if (!isfinite(x[q]))
            continue;
        switch (pass) {
        case SL__ANALYZE_PASS_RANGE:
            p->min = p->n ? fmin(p->min, x[q]) : x[q];
            p->max = p->n ? fmax(p->max, x[q]) : x[q];
            p->n++;
            break;
        case SL__ANALYZE_PASS_MEDIAN:
            if (p->search)
                sl_stats_median_search_add(p->search, x[q]);
            break;
        case SL__ANALYZE_PASS_MAD:
            if (p->search)
                sl_stats_median_search_add(p->search, fabs(x[q] - p->median));
            if (p->first_mad_pass)
                p->sum_abs += fabs(x[q] - p->median);
            break;
        }
    }
}

sl_status sl__analyze_params_start(analyze_param_state *state, size_t n_splits, analyze_pass pass)
{
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < n_splits * SL_ANALYZE_N_PARAMS; i++) {
        analyze_param_state *p = &state[i];
        int median = pass == SL__ANALYZE_PASS_MEDIAN;
        double lo = median ? p->min : 0.0;
        double hi = median ? p->max : fmax(p->max - p->median, p->median - p->min);
        p->first_mad_pass = pass == SL__ANALYZE_PASS_MAD;
        if (p->n)
            st = sl_stats_median_search_new(&p->search, p->n, lo, hi);
    }
    return st;
}

sl_status sl__analyze_params_end_pass(analyze_param_state *state, size_t n_splits,
                                      analyze_pass pass, int *open)
{
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < n_splits * SL_ANALYZE_N_PARAMS; i++) {
        analyze_param_state *p = &state[i];
        int done = 1;
        p->first_mad_pass = 0;
        if (p->search)
            st = sl_stats_median_search_end_pass(p->search, &done,
                                                 pass == SL__ANALYZE_PASS_MEDIAN ? &p->median
                                                                                 : &p->mad);
        *open |= !done;
    }
    return st;
}

void sl__analyze_params_stop(analyze_param_state *state, size_t n_splits)
{
    for (size_t i = 0; i < n_splits * SL_ANALYZE_N_PARAMS; i++) {
        sl_stats_median_search_free(state[i].search);
        state[i].search = NULL;
    }
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

void sl__analyze_params_publish(analyze_param_state *state, sl_analysis *a)
{
    for (size_t s = 0; s < a->n_splits; s++) {
        analyze_param_state *p = &state[s * SL_ANALYZE_N_PARAMS];
        for (int q = 0; q < SL_ANALYZE_N_PARAMS; q++)
            if (p[q].n)
                sl_stats_robust_from(&p[q].robust, p[q].n, p[q].median, p[q].mad,
                                     p[q].sum_abs / (double)p[q].n);
        publish(&a->splits[s], p);
        judge_mobility(a, s);
    }
}

double sl__analyze_mobility_modified_z(const analyze_param_state *state, long split,
                                       double mobility)
{
    const analyze_param_state *p = &state[(size_t)split * SL_ANALYZE_N_PARAMS];
    if (!isfinite(mobility) || p->n < SL_ANALYZE_MIN_FOR_OUTLIERS)
        return NAN;
    return sl_stats_modified_z_of(&p->robust, mobility);
}
