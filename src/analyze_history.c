/* SPDX-License-Identifier: MIT
 * History across lots (see include/splitlot/analyze.h): every lot's level
 * effects grouped by level, pooled with random effects (DerSimonian and
 * Laird) so the between-lot sigma is seen, each lot from the second on
 * judged against limits centre +/- 3 sqrt(tau^2 + SE^2) of the lots before
 * it; and the measured scatter behind the calibrated plan YAML.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"

static char *dup_or_empty(const char *s) { return strdup(s ? s : ""); }

static sl_history_level *find_level(sl_history *h, const sl_analyze_effect *e)
{
    for (size_t i = 0; i < h->n_levels; i++) {
        sl_history_level *l = &h->levels[i];
        if (strcmp(l->factor, e->factor) == 0 && strcmp(l->level, e->level) == 0 &&
            strcmp(l->reference, e->reference) == 0)
            return l;
    }
    return NULL;
}

static sl_history_level *add_level(sl_history *h, const sl_analyze_effect *e, size_t max_points)
{
    sl_history_level *grown = realloc(h->levels, (h->n_levels + 1) * sizeof *grown);
    if (!grown)
        return NULL;
    h->levels = grown;
    sl_history_level *l = &h->levels[h->n_levels];
    memset(l, 0, sizeof *l);
    l->factor = dup_or_empty(e->factor);
    l->level = dup_or_empty(e->level);
    l->reference = dup_or_empty(e->reference);
    l->is_intercept = e->is_intercept;
    l->points = calloc(max_points + 1, sizeof *l->points);
    if (!l->factor || !l->level || !l->reference || !l->points)
        return NULL;
    h->n_levels++;
    return l;
}

static sl_status add_lot(sl_history *h, const sl_analysis *a, size_t lot_index, size_t n_lots)
{
    if (a->effects_status != SL_OK || a->n_effects == 0)
        return SL_OK;
    h->n_lots++;
    for (size_t i = 0; i < a->n_effects; i++) {
        const sl_analyze_effect *e = &a->effects[i];
        if (!isfinite(e->estimated_per_cm2) || !isfinite(e->stderr_per_cm2))
            continue; /* a level this lot could not estimate */
        sl_history_level *l = find_level(h, e);
        if (!l && !(l = add_level(h, e, n_lots)))
            return SL_ENOMEM;
        l->planned_per_cm2 = e->planned_per_cm2; /* the newest lot's plan wins */
        l->planned_sigma_per_cm2 = e->planned_sigma_per_cm2;
        l->points[l->n_points++] = (sl_history_point){ h->lot_names[lot_index],
                                                       h->lot_created[lot_index],
                                                       e->estimated_per_cm2, e->stderr_per_cm2, 0,
                                                       NAN, NAN };
    }
    return SL_OK;
}

/* Estimates and SEs of the lots before k that have not drifted. */
static size_t baseline(const sl_history_level *l, size_t k, double *x, double *se)
{
    size_t m = 0;
    for (size_t i = 0; i < k; i++)
        if (!l->points[i].drift) {
            x[m] = l->points[i].estimated_per_cm2;
            se[m++] = l->points[i].stderr_per_cm2;
        }
    return m;
}

/* Half-width of the limits for a lot of standard error se against a pool:
 * 3 sqrt(tau^2 + se^2 + SE_pool^2) (the SE of the difference between the
 * lot and the centre; tau 0 while one lot cannot show it). */
static double half_width(const sl_stats_pooled *pool, double se)
{
    double tau = isfinite(pool->tau) ? pool->tau : 0.0;
    return SL_STATS_CHART_SIGMAS * sqrt(tau * tau + se * se + pool->se * pool->se);
}

/* Each lot from the second on is judged against the random-effects pool of
 * the lots before it that did not drift (phase II monitoring against a
 * growing baseline). */
static void judge_drift(sl_history_level *l, double *x, double *se)
{
    for (size_t k = 0; k < l->n_points; k++) {
        sl_history_point *p = &l->points[k];
        p->lcl_per_cm2 = p->ucl_per_cm2 = NAN;
        size_t m = baseline(l, k, x, se);
        sl_stats_pooled pool;
        if (m == 0 || sl_stats_pool_random_effects(&pool, x, se, m) != SL_OK)
            continue;
        double w = half_width(&pool, p->stderr_per_cm2);
        p->lcl_per_cm2 = pool.value - w;
        p->ucl_per_cm2 = pool.value + w;
        if (p->estimated_per_cm2 < p->lcl_per_cm2 || p->estimated_per_cm2 > p->ucl_per_cm2) {
            p->drift = 1;
            l->n_drift++;
        }
    }
}

/* The pool of the lots in control and the chart shown: its centre, limits
 * for a lot of the median standard error. */
static void pool_level(sl_history_level *l, double *x, double *se)
{
    size_t m = baseline(l, l->n_points, x, se);
    l->pooled.value = l->pooled.se = l->pooled.tau = NAN;
    l->chart.center = l->chart.lcl = l->chart.ucl = NAN;
    l->chart.n = m;
    if (m == 0 || sl_stats_pool_random_effects(&l->pooled, x, se, m) != SL_OK) {
        l->pooled.value = l->pooled.se = l->pooled.tau = NAN;
        return;
    }
    double median_se = NAN;
    if (m < 2 || sl_stats_median(&median_se, se, m, NULL) != SL_OK)
        return;
    double w = half_width(&l->pooled, median_se);
    l->chart.center = l->pooled.value;
    l->chart.lcl = l->pooled.value - w;
    l->chart.ucl = l->pooled.value + w;
    l->chart.sigma = w / SL_STATS_CHART_SIGMAS;
}

sl_status sl__analyze_history_level(sl_history_level *l)
{
    size_t n = l->n_points;
    double *x = malloc((n + 1) * sizeof *x), *se = malloc((n + 1) * sizeof *se);
    if (!x || !se) {
        free(x);
        free(se);
        return SL_ENOMEM;
    }
    judge_drift(l, x, se);
    /* calibration pools the lots in control: a drifted lot is a finding, not
     * a measurement of what the level normally delivers */
    pool_level(l, x, se);
    free(x);
    free(se);
    return SL_OK;
}

/* The lot's measured scatter into the history's running sums. */
static void add_variation(sl_history *h, const sl_analysis *a)
{
    if (isfinite(a->wafer_sigma_per_cm2)) {
        h->wafer_var_sum += a->wafer_sigma_per_cm2 * a->wafer_sigma_per_cm2;
        h->n_wafer_sigma++;
    }
    if (isfinite(a->device_sigma_V)) {
        h->device_var_sum += a->device_sigma_V * a->device_sigma_V;
        h->n_device_sigma++;
    }
    if (isfinite(a->load_sigma_per_cm2)) {
        h->batch_var_sum += a->load_sigma_per_cm2 * a->load_sigma_per_cm2;
        h->n_batch_sigma++;
    }
}

static sl_status collect_lots(sl_history *h, sl_store *store, const sl_analyze_view *view,
                              sl_diag *diag)
{
    sl_store_lot *lots = NULL;
    size_t n = 0, skipped = 0;
    sl_status st = sl_store_load_lots(store, &lots, &n, diag);
    h->lot_names = calloc(n + 1, sizeof *h->lot_names);
    h->lot_created = calloc(n + 1, sizeof *h->lot_created);
    if (st == SL_OK && (!h->lot_names || !h->lot_created))
        st = SL_ENOMEM;
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        h->lot_names[i] = dup_or_empty(lots[i].lot);
        h->lot_created[i] = dup_or_empty(lots[i].created_utc);
        h->n_lot_names = i + 1;
        sl_analysis_stream *stream = NULL; /* the effects are all it needs */
        size_t before = sl_diag_size(diag);
        st = sl_analyze_lot_stream_view(&stream, store, lots[i].lot, view, diag);
        if (st == SL_ENOTFOUND) { /* a lot without the step, or whose plan lacks the
                                     temperature: no estimates */
            sl_diag_truncate(diag, before);
            st = SL_OK;
            skipped++;
            continue;
        }
        sl_analysis *a = st == SL_OK ? &sl__analysis_stream_release(stream)->pub : NULL;
        if (a) { /* the lot as the revision its view was measured against stored it */
            free(h->lot_created[i]);
            h->lot_created[i] = dup_or_empty(a->view_revision.created_utc);
            if (!h->lot_created[i])
                st = SL_ENOMEM;
        }
        if (st == SL_OK)
            st = add_lot(h, a, i, n);
        if (st == SL_OK)
            add_variation(h, a);
        if (st == SL_OK && i + 1 == n) { /* keep the newest plan for calibration */
            h->newest_plan = a->plan;
            a->plan = NULL;
        }
        sl_analysis_free(a);
    }
    for (size_t i = 0; i < n; i++)
        sl_store_lot_clear(&lots[i]);
    free(lots);
    if (st == SL_OK && n && skipped == n && view && view->step) {
        sl_diag_error(diag, "no lot has measurements at step '%s'", view->step);
        st = SL_ENOTFOUND;
    }
    return st;
}

sl_status sl_analyze_history(sl_history **out, sl_store *store, sl_diag *diag)
{
    return sl_analyze_history_view(out, store, NULL, diag);
}

sl_status sl_analyze_history_view(sl_history **out, sl_store *store, const sl_analyze_view *view,
                                  sl_diag *diag)
{
    *out = NULL;
    sl_history *h = calloc(1, sizeof *h);
    if (!h)
        return SL_ENOMEM;
    sl_status st = collect_lots(h, store, view, diag);
    for (size_t i = 0; st == SL_OK && i < h->n_levels; i++)
        st = sl__analyze_history_level(&h->levels[i]);
    /* root mean square over the lots that measured it */
    h->wafer_sigma_per_cm2 = h->n_wafer_sigma ? sqrt(h->wafer_var_sum / (double)h->n_wafer_sigma) : NAN;
    h->device_sigma_V = h->n_device_sigma ? sqrt(h->device_var_sum / (double)h->n_device_sigma) : NAN;
    h->batch_sigma_per_cm2 = h->n_batch_sigma ? sqrt(h->batch_var_sum / (double)h->n_batch_sigma)
                                              : NAN;
    if (st != SL_OK) {
        sl_history_free(h);
        return st;
    }
    *out = h;
    return SL_OK;
}

void sl_history_free(sl_history *h)
{
    if (!h)
        return;
    for (size_t i = 0; i < h->n_levels; i++) {
        free(h->levels[i].factor);
        free(h->levels[i].level);
        free(h->levels[i].reference);
        free(h->levels[i].points);
    }
    for (size_t i = 0; i < h->n_lot_names; i++) {
        free(h->lot_names[i]);
        free(h->lot_created[i]);
    }
    free(h->lot_names);
    free(h->lot_created);
    free(h->levels);
    sl_plan_free(h->newest_plan);
    free(h);
}
