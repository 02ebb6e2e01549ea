/* SPDX-License-Identifier: MIT
 * Main-effects estimate of every dielectric and treatment level of a lot:
 * wafer means of measured doping as the experimental unit, treatment-coded
 * against each factor's reference level, fitted by weighted least squares
 * with weights 1/var(wafer mean) from the variance components
 * (sl_stats_fit_components), or, where the plan has batched steps, by
 * generalised least squares with the load as a random effect
 * (sl_stats_wafer_effects, the load the unit of a batched level); each
 * level's estimate, SE, df, 95 % interval and its verdict against the plan
 * (sl_stats_verdict).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"


sl_est sl__analyze_planned_level(const sl_plan *plan, size_t factor, size_t level)
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
    double *var;         /* its sampling variance, cm^-4 */
    size_t *wafer;       /* its layout wafer */
} wafer_means;

/* The coefficients of whichever fit was made, each with its own df. */
typedef struct {
    const double *coef, *se;
    double *df;
} effects_fit;

/* Levels that have wafers, per factor, renumbered in plan order: a level
 * without usable wafers cannot be estimated, but must not stop the others;
 * a factor's reference is its first level that has wafers. */
typedef struct {
    size_t stride;       /* most levels of any factor */
    size_t *old_of_new;  /* [factor * stride + new level] -> plan level */
    size_t *n_present;   /* per factor */
} level_map;

static void level_map_free(level_map *map)
{
    free(map->old_of_new);
    free(map->n_present);
}

static void wafer_means_free(wafer_means *m)
{
    free(m->levels);
    free(m->mean);
    free(m->var);
    free(m->wafer);
}

static sl_status collect_wafer_means(wafer_means *m, const sl_analysis *a, const sl_layout *layout,
                                     const double *wafer_mean_per_cm2, const double *wafer_var_per_cm4)
{
    const sl_plan *plan = a->plan;
    size_t nw = layout->n_wafers, nf = plan->n_factors;
    m->levels = calloc(nw * nf + 1, sizeof *m->levels);
    m->mean = calloc(nw + 1, sizeof *m->mean);
    m->var = calloc(nw + 1, sizeof *m->var);
    m->wafer = calloc(nw + 1, sizeof *m->wafer);
    if (!m->levels || !m->mean || !m->var || !m->wafer)
        return SL_ENOMEM;
    for (size_t w = 0; w < nw; w++) {
        long split = layout->wafers[w].split;
        if (split < 0 || !isfinite(wafer_mean_per_cm2[w]))
            continue;
        for (size_t f = 0; f < nf; f++)
            m->levels[m->n_obs * nf + f] = plan->splits[split].levels[f];
        m->mean[m->n_obs] = wafer_mean_per_cm2[w];
        m->var[m->n_obs] = isfinite(wafer_var_per_cm4[w]) ? wafer_var_per_cm4[w] : 0.0;
        m->wafer[m->n_obs] = w;
        m->n_obs++;
    }
    return SL_OK;
}

static sl_status compact_levels(level_map *map, wafer_means *m, const sl_plan *plan)
{
    size_t nf = plan->n_factors;
    map->stride = 1;
    for (size_t f = 0; f < nf; f++)
        if (plan->factors[f].n_levels > map->stride)
            map->stride = plan->factors[f].n_levels;
    size_t *new_of_old = malloc(nf * map->stride * sizeof *new_of_old);
    map->old_of_new = malloc(nf * map->stride * sizeof *map->old_of_new);
    map->n_present = calloc(nf + 1, sizeof *map->n_present);
    if (!new_of_old || !map->old_of_new || !map->n_present) {
        free(new_of_old);
        return SL_ENOMEM;
    }
    for (size_t f = 0; f < nf; f++)
        for (size_t l = 0; l < plan->factors[f].n_levels; l++) {
            size_t used = 0;
            for (size_t i = 0; i < m->n_obs && !used; i++)
                used = m->levels[i * nf + f] == l;
            new_of_old[f * map->stride + l] = map->n_present[f];
            if (used)
                map->old_of_new[f * map->stride + map->n_present[f]++] = l;
        }
    for (size_t i = 0; i < m->n_obs; i++)
        for (size_t f = 0; f < nf; f++)
            m->levels[i * nf + f] = new_of_old[f * map->stride + m->levels[i * nf + f]];
    free(new_of_old);
    return SL_OK;
}

static size_t plan_level(const level_map *map, size_t factor, size_t new_level)
{
    return map->old_of_new[factor * map->stride + new_level];
}

/* Wafers at each (factor, level), for the table. */
static size_t wafers_at(const wafer_means *m, size_t nf, size_t factor, size_t level)
{
    size_t n = 0;
    for (size_t i = 0; i < m->n_obs; i++)
        n += m->levels[i * nf + factor] == level;
    return n;
}

void sl__analyze_intercept_name(char *buf, size_t size, const sl_plan *plan,
                               const size_t *reference_levels, size_t stride)
{
    size_t k = (size_t)snprintf(buf, size, "baseline");
    for (size_t f = 0; f < plan->n_factors && k < size; f++) {
        size_t l = reference_levels ? reference_levels[f * stride] : 0;
        if (f > 0 && plan->factors[f].level_ref[l] < 0)
            continue; /* 'none' adds nothing */
        k += (size_t)snprintf(buf + k, size - k, " + %s", plan->factors[f].levels[l]);
    }
}

static void intercept_effect(sl_analysis *a, sl_analyze_effect *e, const level_map *map,
                             const effects_fit *fit)
{
    const sl_plan *plan = a->plan;
    double planned = plan->baseline_doping_per_cm2.val;
    double var = plan->baseline_doping_per_cm2.sigma * plan->baseline_doping_per_cm2.sigma;
    for (size_t f = 0; f < plan->n_factors; f++) {
        sl_est ref = sl__analyze_planned_level(plan, f, plan_level(map, f, 0));
        planned += ref.val;
        var += ref.sigma * ref.sigma;
    }
    sl__analyze_intercept_name(a->intercept_name, sizeof a->intercept_name, plan,
                              map->old_of_new, map->stride);
    e->factor = "intercept";
    e->level = a->intercept_name;
    e->reference = plan->factors[0].levels[plan_level(map, 0, 0)];
    e->is_intercept = 1;
    e->planned_per_cm2 = planned;
    e->planned_sigma_per_cm2 = sqrt(var);
    e->tolerance_per_cm2 = e->planned_sigma_per_cm2; /* the plan's own uncertainty */
    e->estimated_per_cm2 = fit->coef[0];
    e->stderr_per_cm2 = fit->se[0];
}

/* A level's planned difference from its factor's reference; estimate NaN. */
static void planned_effect(sl_analyze_effect *e, const sl_plan *plan, size_t factor, size_t level,
                           size_t reference)
{
    const sl_plan_factor *f = &plan->factors[factor];
    sl_est planned = sl__analyze_planned_level(plan, factor, level);
    e->factor = f->name;
    e->level = f->levels[level];
    e->reference = f->levels[reference];
    e->planned_per_cm2 = planned.val - sl__analyze_planned_level(plan, factor, reference).val;
    e->planned_sigma_per_cm2 = planned.sigma;
    e->tolerance_per_cm2 = sl_plan_level_tolerance_per_cm2(plan, factor, level);
    e->estimated_per_cm2 = e->stderr_per_cm2 = NAN;
    e->ci_low_per_cm2 = e->ci_high_per_cm2 = NAN;
    e->verdict = SL_VERDICT_INCONCLUSIVE;
}

/* The interval of the estimate and the verdict against the plan. */
static void judge(sl_analysis *a, sl_analyze_effect *e, double df)
{
    e->df = df;
    sl_stats_verdict_kind v = sl_stats_verdict(e->estimated_per_cm2 - e->planned_per_cm2,
                                               e->stderr_per_cm2, df, e->tolerance_per_cm2,
                                               SL_ANALYZE_ALPHA);
    e->verdict = v;
    /* the interval the verdict rests on, around the estimate */
    double t = sl_stats_t_quantile(1.0 - 0.5 * SL_ANALYZE_ALPHA, df);
    e->ci_low_per_cm2 = e->ci_high_per_cm2 = NAN;
    if (isfinite(t) && isfinite(e->stderr_per_cm2)) {
        e->ci_low_per_cm2 = e->estimated_per_cm2 - t * e->stderr_per_cm2;
        e->ci_high_per_cm2 = e->estimated_per_cm2 + t * e->stderr_per_cm2;
    }
    e->off_plan = v == SL_VERDICT_OFF_PLAN || v == SL_VERDICT_DIFFERS;
    if (!e->is_intercept) {
        a->n_verdict[v]++;
        a->n_off_plan += e->off_plan;
    }
}

/* Levels of the plan without usable wafers, listed with no estimate. */
static size_t count_absent(const sl_plan *plan, const level_map *map)
{
    size_t n = 0;
    for (size_t f = 0; f < plan->n_factors; f++)
        n += plan->factors[f].n_levels - map->n_present[f];
    return n;
}

static void fill_absent(sl_analysis *a, const level_map *map)
{
    const sl_plan *plan = a->plan;
    for (size_t f = 0; f < plan->n_factors; f++)
        for (size_t l = 0, k = 0; l < plan->factors[f].n_levels; l++) {
            if (k < map->n_present[f] && plan_level(map, f, k) == l) {
                k++;
                continue;
            }
            planned_effect(&a->effects[a->n_effects++], plan, f, l, plan_level(map, f, 0));
        }
}

static sl_status fill_effects(sl_analysis *a, const sl_stats_design *design, const effects_fit *fit,
                              const wafer_means *m, const level_map *map)
{
    a->effects = calloc(design->n_coef + count_absent(a->plan, map), sizeof *a->effects);
    if (!a->effects)
        return SL_ENOMEM;
    for (size_t c = 0; c < design->n_coef; c++) {
        sl_analyze_effect *e = &a->effects[a->n_effects++];
        const sl_stats_column *col = &design->columns[c];
        if (col->factor == SL_STATS_INTERCEPT) {
            intercept_effect(a, e, map, fit);
            e->n_wafers = m->n_obs;
        } else {
            planned_effect(e, a->plan, col->factor, plan_level(map, col->factor, col->level),
                           plan_level(map, col->factor, 0));
            e->estimated_per_cm2 = fit->coef[c];
            e->stderr_per_cm2 = fit->se[c];
            e->n_wafers = wafers_at(m, a->plan->n_factors, col->factor, col->level);
        }
        judge(a, e, fit->df[c]);
    }
    fill_absent(a, map);
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

/* Each wafer's load in each batched step as one index over every step's
 * loads (-1: none), from the stored layout; the number of loads. */
static size_t load_indices(long *load, const sl_plan *plan, const sl_layout *layout,
                           const wafer_means *m)
{
    size_t steps = plan->n_batches, offset = 0;
    for (size_t b = 0; b < steps; b++) {
        size_t most = 0;
        for (size_t i = 0; i < m->n_obs; i++) {
            const size_t *l = layout->wafers[m->wafer[i]].load;
            most = l && l[b] > most ? l[b] : most;
        }
        for (size_t i = 0; i < m->n_obs; i++) {
            const size_t *l = layout->wafers[m->wafer[i]].load;
            load[i * steps + b] = l && l[b] > 0 ? (long)(offset + l[b] - 1) : -1;
        }
        offset += most;
    }
    return offset;
}

/* With loads: generalised least squares with the load as a random effect
 * (sl_stats_wafer_effects: REML components, df per coefficient). */
static sl_status fit_with_loads(sl_stats_wafer_fit *out, sl_analysis *a, const sl_layout *layout,
                                const wafer_means *m, const sl_stats_design *design)
{
    size_t steps = a->plan->n_batches;
    long *load = malloc((m->n_obs * steps + 1) * sizeof *load);
    if (!load)
        return SL_ENOMEM;
    size_t n_loads = load_indices(load, a->plan, layout, m);
    sl_stats_wafer_data in = { m->n_obs, design->n_coef, n_loads, steps, design->x, m->mean,
                               m->var, n_loads ? load : NULL };
    if (!n_loads)
        in.n_steps = 0;
    sl_status st = sl_stats_wafer_effects(out, &in);
    free(load);
    if (st == SL_OK) {
        a->wafer_sigma_per_cm2 = out->wafer_sigma_per_cm2;
        a->load_sigma_per_cm2 = n_loads ? out->load_sigma_per_cm2 : NAN;
    }
    return st;
}

/* Without loads: weighted least squares with the wafer variance by moments. */
static sl_status fit_wafers(sl_stats_fit **fit, sl_analysis *a, const wafer_means *m,
                            const sl_stats_design *design, sl_diag *fit_diag)
{
    double unit_var = NAN;
    sl_status st = sl_stats_fit_components(fit, &unit_var, design->x, m->mean, m->var, m->n_obs,
                                           design->n_coef, fit_diag);
    if (st == SL_OK)
        a->wafer_sigma_per_cm2 = sqrt(unit_var);
    return st;
}

/* Fit the design by whichever model the plan calls for; the effects. */
static sl_status fit_and_fill(sl_analysis *a, const sl_layout *layout, const wafer_means *m,
                              const level_map *map, const sl_stats_design *design,
                              sl_diag *fit_diag)
{
    sl_stats_fit *fit = NULL;
    sl_stats_wafer_fit *wfit = NULL;
    double *df = calloc(design->n_coef + 1, sizeof *df);
    effects_fit ef = { NULL, NULL, df };
    sl_status st = df ? SL_OK : SL_ENOMEM;
    if (st == SL_OK && a->plan->n_batches && design->n_coef <= SL_STATS_MAX_COEF) {
        st = (wfit = malloc(sizeof *wfit)) ? fit_with_loads(wfit, a, layout, m, design) : SL_ENOMEM;
        if (st == SL_OK) {
            ef.coef = wfit->coef;
            ef.se = wfit->se;
            for (size_t c = 0; c < design->n_coef; c++)
                df[c] = wfit->df[c];
        }
    } else if (st == SL_OK && (st = fit_wafers(&fit, a, m, design, fit_diag)) == SL_OK) {
        ef.coef = fit->coef;
        ef.se = fit->se;
        for (size_t c = 0; c < design->n_coef; c++)
            df[c] = (double)fit->df_resid;
    }
    if (st == SL_OK)
        st = fill_effects(a, design, &ef, m, map);
    else if (st != SL_ENOMEM)
        note_failure(a, st, fit_diag, m->n_obs, design->n_coef);
    sl_stats_fit_free(fit);
    free(wfit);
    free(df);
    return st == SL_ENOMEM ? st : SL_OK;
}

sl_status sl__analyze_effects(sl_analysis *a, const sl_layout *layout,
                             const double *wafer_mean_per_cm2, const double *wafer_var_per_cm4)
{
    wafer_means m = { 0 };
    level_map map = { 0 };
    sl_stats_design *design = NULL;
    sl_diag *fit_diag = sl_diag_new();
    sl_status st = fit_diag ? collect_wafer_means(&m, a, layout, wafer_mean_per_cm2, wafer_var_per_cm4)
                            : SL_ENOMEM;
    a->wafer_sigma_per_cm2 = a->load_sigma_per_cm2 = NAN;
    if (st == SL_OK && m.n_obs == 0) {
        note_failure(a, SL_EINPUT, fit_diag, 0, 1);
    } else if (st == SL_OK && (st = compact_levels(&map, &m, a->plan)) == SL_OK) {
        sl_status fst = sl_stats_design_treatment(&design, m.levels, m.n_obs, a->plan->n_factors,
                                                  map.n_present, fit_diag);
        if (fst == SL_OK && m.n_obs <= design->n_coef)
            fst = SL_EINPUT;
        if (fst == SL_OK)
            st = fit_and_fill(a, layout, &m, &map, design, fit_diag);
        else if (fst == SL_ENOMEM)
            st = fst;
        else
            note_failure(a, fst, fit_diag, m.n_obs, design ? design->n_coef : 0);
    }
    sl_stats_design_free(design);
    wafer_means_free(&m);
    level_map_free(&map);
    sl_diag_free(fit_diag);
    return st;
}
