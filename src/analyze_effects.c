/* SPDX-License-Identifier: MIT
 * Main-effects estimate of every dielectric and treatment level of a lot:
 * wafer means of measured doping (usable, non-outlier devices) as the
 * experimental unit, weighted by their device counts, treatment-coded against
 * each factor's reference level, fitted by GSL weighted least squares through
 * stats.h; a level is off-plan when its planned value is both beyond 3
 * standard errors and more than twice the plan's own sigma from the estimate.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"

#define SL_EFFECT_SE_LIMIT 3.0     /* statistically clear: beyond 3 SE */
#define SL_EFFECT_PLAN_SIGMAS 2.0  /* and practically large: beyond 2 plan sigmas */

sl_est sl_analyze_planned_level(const sl_plan *plan, size_t factor, size_t level)
{
    sl_est none = { 0.0, 0.0 };
    long ref = plan->factors[factor].level_ref[level];
    if (factor == 0)
        return plan->dielectrics[ref].doping_per_cm2;
    return ref < 0 ? none : plan->treatments[ref].doping_per_cm2;
}

typedef struct {
    size_t n_obs;
    size_t *levels;      /* n_obs x n_factors */
    double *mean;        /* wafer mean doping, cm^-2 */
    double *weight;      /* usable devices behind it */
} wafer_means;

static void wafer_means_free(wafer_means *m)
{
    free(m->levels);
    free(m->mean);
    free(m->weight);
}

static sl_status collect_wafer_means(wafer_means *m, const sl_analysis *a, const sl_layout *layout)
{
    const sl_plan *plan = a->plan;
    size_t nw = layout->n_wafers, nf = plan->n_factors;
    m->levels = calloc(nw * nf + 1, sizeof *m->levels);
    m->mean = calloc(nw + 1, sizeof *m->mean);
    m->weight = calloc(nw + 1, sizeof *m->weight);
    double *sum = calloc(nw + 1, sizeof *sum);
    if (!m->levels || !m->mean || !m->weight || !sum) {
        free(sum);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < a->n_devices; i++) {
        const sl_analyze_device *d = &a->devices[i];
        if (!isfinite(d->doping_measured_per_cm2) || (d->flags & SL_FLAG_OUTLIER))
            continue;
        long w = sl_plan_wafer_index(plan, d->wafer);
        if (w >= 0) {
            sum[w] += d->doping_measured_per_cm2;
            m->weight[w] += 1.0;
        }
    }
    for (size_t w = 0; w < nw; w++) {
        long split = layout->wafers[w].split;
        if (split < 0 || m->weight[w] == 0.0)
            continue;
        for (size_t f = 0; f < nf; f++)
            m->levels[m->n_obs * nf + f] = plan->splits[split].levels[f];
        m->mean[m->n_obs] = sum[w] / m->weight[w];
        m->weight[m->n_obs] = m->weight[w];
        m->n_obs++;
    }
    free(sum);
    return SL_OK;
}

/* Wafers at each (factor, level), for the table. */
static size_t wafers_at(const wafer_means *m, size_t nf, size_t factor, size_t level)
{
    size_t n = 0;
    for (size_t i = 0; i < m->n_obs; i++)
        n += m->levels[i * nf + factor] == level;
    return n;
}

static void intercept_effect(sl_analyze_effect *e, const sl_plan *plan, const sl_stats_fit *fit)
{
    double planned = plan->baseline_doping_per_cm2.val;
    double var = plan->baseline_doping_per_cm2.sigma * plan->baseline_doping_per_cm2.sigma;
    for (size_t f = 0; f < plan->n_factors; f++) {
        sl_est ref = sl_analyze_planned_level(plan, f, 0);
        planned += ref.val;
        var += ref.sigma * ref.sigma;
    }
    e->factor = "intercept";
    e->level = "baseline";
    e->reference = plan->factors[0].levels[0];
    e->is_intercept = 1;
    e->planned_per_cm2 = planned;
    e->planned_sigma_per_cm2 = sqrt(var);
    e->estimated_per_cm2 = fit->coef[0];
    e->stderr_per_cm2 = fit->se[0];
}

static void level_effect(sl_analyze_effect *e, const sl_plan *plan, const sl_stats_column *col,
                         const sl_stats_fit *fit, size_t c)
{
    const sl_plan_factor *f = &plan->factors[col->factor];
    sl_est level = sl_analyze_planned_level(plan, col->factor, col->level);
    sl_est ref = sl_analyze_planned_level(plan, col->factor, 0);
    e->factor = f->name;
    e->level = f->levels[col->level];
    e->reference = f->levels[0];
    e->planned_per_cm2 = level.val - ref.val;
    e->planned_sigma_per_cm2 = level.sigma;
    e->estimated_per_cm2 = fit->coef[c];
    e->stderr_per_cm2 = fit->se[c];
}

static void judge(sl_analyze_effect *e)
{
    double gap = fabs(e->planned_per_cm2 - e->estimated_per_cm2);
    e->off_plan = isfinite(e->stderr_per_cm2) && gap > SL_EFFECT_SE_LIMIT * e->stderr_per_cm2 &&
                  gap > SL_EFFECT_PLAN_SIGMAS * e->planned_sigma_per_cm2;
}

static sl_status fill_effects(sl_analysis *a, const sl_stats_design *design, const sl_stats_fit *fit,
                              const wafer_means *m)
{
    a->effects = calloc(design->n_coef, sizeof *a->effects);
    if (!a->effects)
        return SL_ENOMEM;
    a->n_effects = design->n_coef;
    for (size_t c = 0; c < design->n_coef; c++) {
        sl_analyze_effect *e = &a->effects[c];
        const sl_stats_column *col = &design->columns[c];
        if (col->factor == SL_STATS_INTERCEPT) {
            intercept_effect(e, a->plan, fit);
            e->n_wafers = m->n_obs;
        } else {
            level_effect(e, a->plan, col, fit, c);
            e->n_wafers = wafers_at(m, a->plan->n_factors, col->factor, col->level);
        }
        judge(e);
        a->n_off_plan += e->off_plan && !e->is_intercept;
    }
    return SL_OK;
}

static void note_failure(sl_analysis *a, sl_status st, const sl_diag *fit_diag, size_t n_obs,
                         size_t n_coef)
{
    a->effects_status = st;
    if (n_obs <= n_coef)
        snprintf(a->effects_note, sizeof a->effects_note,
                 "effects not estimated: %zu wafers with usable devices for %zu coefficients "
                 "(need more wafers than coefficients)", n_obs, n_coef);
    else
        snprintf(a->effects_note, sizeof a->effects_note, "effects not estimated: %s",
                 sl_diag_size(fit_diag) ? sl_diag_last(fit_diag) : sl_status_str(st));
}

sl_status sl_analyze_effects(sl_analysis *a, const sl_layout *layout)
{
    wafer_means m = { 0 };
    sl_stats_design *design = NULL;
    sl_stats_fit *fit = NULL;
    sl_diag *fit_diag = sl_diag_new();
    size_t *n_levels = calloc(a->plan->n_factors + 1, sizeof *n_levels);
    sl_status st = (fit_diag && n_levels) ? collect_wafer_means(&m, a, layout) : SL_ENOMEM;
    for (size_t f = 0; n_levels && f < a->plan->n_factors; f++)
        n_levels[f] = a->plan->factors[f].n_levels;
    if (st == SL_OK && m.n_obs == 0) {
        note_failure(a, SL_EINPUT, fit_diag, 0, 1);
    } else if (st == SL_OK) {
        sl_status fst = sl_stats_design_treatment(&design, m.levels, m.n_obs, a->plan->n_factors,
                                                  n_levels, fit_diag);
        if (fst == SL_OK && m.n_obs <= design->n_coef)
            fst = SL_EINPUT;
        else if (fst == SL_OK)
            fst = sl_stats_linear_fit(&fit, design->x, m.mean, m.weight, m.n_obs, design->n_coef,
                                      fit_diag);
        if (fst == SL_OK)
            st = fill_effects(a, design, fit, &m);
        else if (fst == SL_ENOMEM)
            st = fst;
        else
            note_failure(a, fst, fit_diag, m.n_obs, design ? design->n_coef : 0);
    }
    sl_stats_fit_free(fit);
    sl_stats_design_free(design);
    wafer_means_free(&m);
    free(n_levels);
    sl_diag_free(fit_diag);
    return st;
}
