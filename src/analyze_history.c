/* SPDX-License-Identifier: MIT
 * History across lots (see include/splitlot/analyze.h): every lot's level
 * effects grouped by level, inverse-variance pooled, charted as individuals
 * with limits from the average moving range, drift flagged; and calibrated
 * plan YAML for the next lot from the pooled values.
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
                                                       e->estimated_per_cm2, e->stderr_per_cm2, 0 };
    }
    return SL_OK;
}

/* Centre and guarded limits of an individuals chart over the baseline values
 * x[0..n) with standard errors se: sigma = max(MR-bar / 1.128, median SE), so
 * two lots that happen to agree closely do not make the limits absurdly tight
 * (the guard is our choice; the chart itself follows Montgomery). */
static int guarded_chart(sl_stats_ichart *c, double *x, double *se, int *flags, size_t n)
{
    if (n < 2 || sl_stats_individuals_chart(c, flags, x, n) != SL_OK)
        return -1;
    double median_se = 0.0;
    if (sl_stats_median(&median_se, se, n, NULL) != SL_OK || !isfinite(median_se))
        median_se = 0.0;
    double sigma = fmax(c->sigma, median_se);
    c->lcl = c->center - SL_STATS_CHART_SIGMAS * sigma;
    c->ucl = c->center + SL_STATS_CHART_SIGMAS * sigma;
    return 0;
}

/* Baseline of the lots before k that have not drifted, into x and se. */
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

/* Each lot is judged against limits from the lots before it (phase II
 * monitoring against a growing baseline); the chart shown is that of every
 * lot that did not drift. */
static void judge_drift(sl_history_level *l, double *x, double *se, int *flags)
{
    sl_stats_ichart c;
    for (size_t k = 2; k < l->n_points; k++) {
        size_t m = baseline(l, k, x, se);
        double v = l->points[k].estimated_per_cm2;
        if (guarded_chart(&c, x, se, flags, m) == 0 && (v < c.lcl || v > c.ucl)) {
            l->points[k].drift = 1;
            l->n_drift++;
        }
    }
    size_t m = baseline(l, l->n_points, x, se);
    l->chart.center = l->chart.lcl = l->chart.ucl = NAN;
    if (guarded_chart(&c, x, se, flags, m) == 0)
        l->chart = c;
}

static sl_status chart_level(sl_history_level *l)
{
    size_t n = l->n_points;
    double *x = malloc((n + 1) * sizeof *x), *se = malloc((n + 1) * sizeof *se);
    int *flags = calloc(n + 1, sizeof *flags);
    if (!x || !se || !flags) {
        free(x);
        free(se);
        free(flags);
        return SL_ENOMEM;
    }
    judge_drift(l, x, se, flags);
    /* calibration pools the lots in control: a drifted lot is a finding, not
     * a measurement of what the level normally delivers */
    size_t m = baseline(l, n, x, se);
    l->pooled.value = l->pooled.se = NAN;
    if (sl_stats_pool_inverse_variance(&l->pooled, x, se, m) != SL_OK)
        l->pooled.value = l->pooled.se = NAN;
    free(x);
    free(se);
    free(flags);
    return SL_OK;
}

static sl_status collect_lots(sl_history *h, sl_store *store, const sl_analyze_view *view,
                              sl_diag *diag)
{
    sl_store_lot *lots = NULL;
    size_t n = 0;
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
        if (st == SL_ENOTFOUND) { /* a lot whose plan lacks the temperature: no estimates */
            sl_diag_truncate(diag, before);
            st = SL_OK;
            continue;
        }
        sl_analysis *a = st == SL_OK ? &sl_analysis_stream_release(stream)->pub : NULL;
        if (st == SL_OK)
            st = add_lot(h, a, i, n);
        if (st == SL_OK && i + 1 == n) { /* keep the newest plan for calibration */
            h->newest_plan = a->plan;
            a->plan = NULL;
        }
        sl_analysis_free(a);
    }
    for (size_t i = 0; i < n; i++)
        sl_store_lot_clear(&lots[i]);
    free(lots);
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
        st = chart_level(&h->levels[i]);
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
