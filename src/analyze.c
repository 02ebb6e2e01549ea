/* SPDX-License-Identifier: MIT
 * One lot against its plan (see include/splitlot/analyze.h): devices with
 * predictions, robust flags and reasons, split summaries, ANOVA across splits
 * and the failure-analysis order. Effects are in analyze_effects.c.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"
#include "splitlot/predict.h"

/* Fewest usable devices in a split for modified z-scores to mean anything
 * (common practice: a median and MAD of fewer points are too unstable). */
#define SL_ANALYZE_MIN_FOR_OUTLIERS 5

static int is_usable(const sl_store_device_row *r)
{
    return strcmp(r->fit_class, "ok") == 0 && isfinite(r->cnp_V);
}

static sl_status load_plan(sl_analysis *a, sl_layout **layout, sl_store *store, const char *lot,
                           sl_diag *diag)
{
    sl_status st = sl_store_find_lot(store, &a->lot, lot, diag);
    if (st != SL_OK)
        return st;
    st = sl_plan_parse(&a->plan, a->lot.plan_text, strlen(a->lot.plan_text), a->lot.plan_name, diag);
    if (st == SL_OK)
        st = sl_layout_build(layout, a->plan, diag);
    if (st != SL_OK) {
        sl_diag_error(diag, "lot '%s': its stored plan no longer loads", lot);
        return SL_EDB;
    }
    sl_diag_clear(diag);
    return SL_OK;
}

/* Predicted neutrality point, gate range and C_g per split. */
static sl_status load_predictions(sl_analysis *a, sl_diag *diag)
{
    sl_prediction *pred = NULL;
    size_t n = 0;
    sl_status st = sl_predict_plan(&pred, &n, a->plan, diag);
    if (st != SL_OK)
        return st;
    size_t ns = a->plan->n_splits, nt = a->plan->n_temperatures;
    a->splits = calloc(ns ? ns : 1, sizeof *a->splits);
    a->split_gate_min_V = calloc(ns ? ns : 1, sizeof(double));
    a->split_gate_max_V = calloc(ns ? ns : 1, sizeof(double));
    a->split_capacitance_F_per_m2 = calloc(ns ? ns : 1, sizeof(double));
    if (!a->splits || !a->split_gate_min_V || !a->split_gate_max_V || !a->split_capacitance_F_per_m2) {
        free(pred);
        return SL_ENOMEM;
    }
    a->n_splits = ns;
    for (size_t s = 0; s < ns; s++) {
        const sl_prediction *p = &pred[s * nt]; /* V_cnp does not depend on T */
        a->splits[s].split = s;
        a->splits[s].cnp_predicted_V = p->cnp_V.val;
        a->splits[s].cnp_predicted_sigma_V = p->cnp_V.sigma;
        a->split_gate_min_V[s] = p->gate_min_V;
        a->split_gate_max_V[s] = p->gate_max_V;
        a->split_capacitance_F_per_m2[s] = p->gate_capacitance_F_per_m2;
    }
    free(pred);
    return SL_OK;
}

static void fill_device(sl_analysis *a, sl_analyze_device *d, const sl_store_device_row *r, long split)
{
    memset(d, 0, sizeof *d);
    d->device_id = r->id;
    d->wafer = r->wafer;
    d->device = r->name;
    d->die_x = r->die_x;
    d->die_y = r->die_y;
    d->split = split;
    d->fit_class = r->fit_class;
    d->cnp_predicted_V = a->splits[split].cnp_predicted_V;
    d->cnp_predicted_sigma_V = a->splits[split].cnp_predicted_sigma_V;
    d->mobility_cm2_per_Vs = r->mobility_cm2_per_Vs;
    d->cnp_measured_V = d->deviation_V = d->z = d->modified_z = d->doping_measured_per_cm2 = NAN;
    if (is_usable(r)) {
        d->cnp_measured_V = r->cnp_V;
        d->deviation_V = r->cnp_V - d->cnp_predicted_V;
        d->doping_measured_per_cm2 = -a->split_capacitance_F_per_m2[split] * r->cnp_V /
                                     SL_SI_ELEMENTARY_CHARGE * SL_PER_CM2_PER_PER_M2;
    } else {
        d->flags |= strcmp(r->fit_class, "unmeasured") == 0 ? SL_FLAG_UNMEASURED : SL_FLAG_FIT_CLASS;
    }
}

static sl_status load_devices(sl_analysis *a, const sl_layout *layout, sl_store *store,
                              sl_store_device_row **rows, sl_diag *diag)
{
    size_t n = 0;
    sl_status st = sl_store_load_devices(store, rows, &n, a->lot.lot_id, diag);
    if (st != SL_OK)
        return st;
    a->devices = calloc(n ? n : 1, sizeof *a->devices);
    if (!a->devices)
        return SL_ENOMEM;
    for (size_t i = 0; i < n; i++) {
        long split = sl_layout_split_of_wafer(layout, (*rows)[i].wafer);
        if (split < 0)
            continue; /* a wafer the newest plan revision no longer uses */
        fill_device(a, &a->devices[a->n_devices++], &(*rows)[i], split);
    }
    return SL_OK;
}

/* Usable measured V_cnp of one split into x; returns the count. */
static size_t split_values(const sl_analysis *a, size_t split, double *x)
{
    size_t n = 0;
    for (size_t i = 0; i < a->n_devices; i++)
        if (a->devices[i].split == (long)split && isfinite(a->devices[i].cnp_measured_V))
            x[n++] = a->devices[i].cnp_measured_V;
    return n;
}

static void summarize_split(sl_analysis *a, sl_analyze_split *s, double *x, double *scratch)
{
    size_t n = split_values(a, s->split, x);
    s->n_usable = n;
    s->cnp.n = n;
    s->cnp.mean = s->cnp.sd = s->cnp.ci_low = s->cnp.ci_high = NAN;
    s->bias_V = s->spread_V = NAN;
    if (n == 0)
        return;
    sl_stats_summarize(&s->cnp, x, n, 0.95);
    s->bias_V = s->cnp.mean - s->cnp_predicted_V;
    s->prediction_in_ci = n >= 2 && s->cnp_predicted_V >= s->cnp.ci_low &&
                          s->cnp_predicted_V <= s->cnp.ci_high;
    sl_stats_robust robust;
    if (sl_stats_robust_scale(&robust, x, n, scratch) != SL_OK)
        return;
    s->spread_V = robust.scale > 0.0 ? robust.scale : (n >= 2 ? s->cnp.sd : 0.0);
    for (size_t i = 0; i < a->n_devices; i++) {
        sl_analyze_device *d = &a->devices[i];
        if (d->split != (long)s->split || !isfinite(d->cnp_measured_V))
            continue;
        double combined = hypot(d->cnp_predicted_sigma_V, s->spread_V);
        /* no spread at all (a plan without sigmas, a split of one device):
         * the interval is a point, so any deviation lies outside it */
        if (combined > 0.0)
            d->z = d->deviation_V / combined;
        else
            d->z = d->deviation_V == 0.0 ? 0.0 : copysign(INFINITY, d->deviation_V);
        if (fabs(d->z) > SL_ANALYZE_INTERVAL_SIGMAS)
            d->flags |= SL_FLAG_OFF_PREDICTION;
        if (n >= SL_ANALYZE_MIN_FOR_OUTLIERS) {
            d->modified_z = sl_stats_modified_z_of(&robust, d->cnp_measured_V);
            if (fabs(d->modified_z) > SL_STATS_MODIFIED_Z_THRESHOLD)
                d->flags |= SL_FLAG_OUTLIER;
        }
    }
}

static sl_status summarize_splits(sl_analysis *a)
{
    double *x = malloc((a->n_devices + 1) * sizeof *x);
    double *scratch = malloc((a->n_devices + 1) * sizeof *scratch);
    if (!x || !scratch) {
        free(x);
        free(scratch);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < a->n_devices; i++)
        a->splits[a->devices[i].split].n_devices++;
    for (size_t s = 0; s < a->n_splits; s++) {
        summarize_split(a, &a->splits[s], x, scratch);
        a->n_usable += a->splits[s].n_usable;
        double mean = a->splits[s].cnp.mean;
        if (isfinite(mean) && (mean < a->split_gate_min_V[s] || mean > a->split_gate_max_V[s]))
            a->n_splits_cnp_outside++;
    }
    free(x);
    free(scratch);
    return SL_OK;
}

/* ---- reasons and the failure-analysis order ---- */

static const char *class_reason(const char *cls)
{
    static const struct { const char *cls, *why; } reasons[] = {
        { "short", "short: resistance stays near zero over the sweep" },
        { "open", "open: no current, resistance at the instrument's limit" },
        { "cnp-outside-sweep", "neutrality point outside the swept gate range" },
        { "no-convergence", "transfer curve fit did not converge" },
        { "poor-fit", "transfer curve does not follow the model (noisy or no gate response)" },
        { "unmeasured", "probed, but no neutrality point was reported" },
    };
    for (size_t i = 0; i < sizeof reasons / sizeof reasons[0]; i++)
        if (strcmp(cls, reasons[i].cls) == 0)
            return reasons[i].why;
    return "extraction failed";
}

static void describe(sl_analyze_device *d)
{
    if (d->flags & (SL_FLAG_FIT_CLASS | SL_FLAG_UNMEASURED)) {
        snprintf(d->reason, sizeof d->reason, "%s", class_reason(d->fit_class));
        d->severity = (d->flags & SL_FLAG_FIT_CLASS) ? 1000.0 : 500.0;
        return;
    }
    size_t k = 0;
    if (d->flags & SL_FLAG_OFF_PREDICTION && isfinite(d->z))
        k += (size_t)snprintf(d->reason + k, sizeof d->reason - k,
                              "neutrality point %.2f V %s the prediction (%.1f sigma)",
                              fabs(d->deviation_V), d->deviation_V > 0 ? "above" : "below", fabs(d->z));
    else if (d->flags & SL_FLAG_OFF_PREDICTION)
        k += (size_t)snprintf(d->reason + k, sizeof d->reason - k,
                              "neutrality point %.2f V %s the prediction (neither the plan nor "
                              "the split gives a spread)",
                              fabs(d->deviation_V), d->deviation_V > 0 ? "above" : "below");
    if (d->flags & SL_FLAG_OUTLIER)
        snprintf(d->reason + k, sizeof d->reason - k, "%s%s its split's devices (modified z %.1f)",
                 k ? "; " : "", d->modified_z > 0 ? "far above" : "far below", d->modified_z);
    d->severity = fmax(isfinite(d->z) ? fabs(d->z) : 0.0,
                       isfinite(d->modified_z) ? fabs(d->modified_z) : 0.0);
    if (d->flags & SL_FLAG_OFF_PREDICTION)
        d->severity += 100.0;
}

typedef struct {
    double severity;
    const char *wafer, *device;
    size_t index;
} flagged_key;

static int by_severity(const void *pa, const void *pb)
{
    const flagged_key *a = pa, *b = pb;
    if (a->severity != b->severity)
        return a->severity > b->severity ? -1 : 1;
    int c = strcmp(a->wafer, b->wafer);
    return c ? c : strcmp(a->device, b->device);
}

static sl_status order_flagged(sl_analysis *a)
{
    a->flagged = malloc((a->n_devices + 1) * sizeof *a->flagged);
    flagged_key *keys = malloc((a->n_devices + 1) * sizeof *keys);
    if (!a->flagged || !keys) {
        free(keys);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < a->n_devices; i++) {
        sl_analyze_device *d = &a->devices[i];
        if (!d->flags)
            continue;
        describe(d);
        a->splits[d->split].n_flagged++;
        keys[a->n_flagged++] = (flagged_key){ d->severity, d->wafer, d->device, i };
    }
    qsort(keys, a->n_flagged, sizeof *keys, by_severity);
    for (size_t k = 0; k < a->n_flagged; k++)
        a->flagged[k] = keys[k].index;
    free(keys);
    return SL_OK;
}

/* One-way ANOVA of measured doping across splits. */
static sl_status anova_splits(sl_analysis *a)
{
    double *x = malloc((a->n_devices + 1) * sizeof *x);
    size_t *sizes = calloc(a->n_splits + 1, sizeof *sizes);
    double *means = calloc(a->n_splits + 1, sizeof *means);
    sl_status st = (x && sizes && means) ? SL_OK : SL_ENOMEM;
    size_t n = 0;
    for (size_t s = 0; st == SL_OK && s < a->n_splits; s++)
        for (size_t i = 0; i < a->n_devices; i++)
            if (a->devices[i].split == (long)s && isfinite(a->devices[i].doping_measured_per_cm2)) {
                x[n++] = a->devices[i].doping_measured_per_cm2;
                sizes[s]++;
            }
    a->anova.f = a->anova.p = NAN;
    if (st == SL_OK && n > 0 && sl_stats_anova_oneway(&a->anova, means, x, sizes, a->n_splits) != SL_OK)
        a->anova.f = a->anova.p = NAN;
    free(x);
    free(sizes);
    free(means);
    return st;
}

int sl_analyze_flag_names(const sl_analyze_device *d, const char **names)
{
    int n = 0;
    if (d->flags & SL_FLAG_OUTLIER)
        names[n++] = "outlier";
    if (d->flags & SL_FLAG_OFF_PREDICTION)
        names[n++] = "off-prediction";
    if (d->flags & SL_FLAG_FIT_CLASS)
        names[n++] = d->fit_class;
    if (d->flags & SL_FLAG_UNMEASURED)
        names[n++] = "unmeasured";
    return n;
}

/* Device rows own the strings the analysis points at: kept with it. */
typedef struct {
    sl_analysis pub;
    sl_store_device_row *rows;
} analysis_owner;

void sl_analysis_free(sl_analysis *a)
{
    if (!a)
        return;
    analysis_owner *o = (analysis_owner *)a;
    free(o->rows);
    free(a->devices);
    free(a->splits);
    free(a->effects);
    free(a->flagged);
    free(a->split_gate_min_V);
    free(a->split_gate_max_V);
    free(a->split_capacitance_F_per_m2);
    sl_plan_free(a->plan);
    sl_store_lot_clear(&a->lot);
    free(o);
}

sl_status sl_analyze_lot(sl_analysis **out, sl_store *store, const char *lot, sl_diag *diag)
{
    *out = NULL;
    analysis_owner *o = calloc(1, sizeof *o);
    if (!o)
        return SL_ENOMEM;
    sl_analysis *a = &o->pub;
    sl_layout *layout = NULL;
    sl_status st = load_plan(a, &layout, store, lot, diag);
    if (st == SL_OK)
        st = load_predictions(a, diag);
    if (st == SL_OK)
        st = load_devices(a, layout, store, &o->rows, diag);
    if (st == SL_OK)
        st = summarize_splits(a);
    if (st == SL_OK)
        st = order_flagged(a);
    if (st == SL_OK)
        st = anova_splits(a);
    if (st == SL_OK)
        st = sl_analyze_effects(a, layout);
    sl_layout_free(layout);
    if (st != SL_OK) {
        sl_analysis_free(a);
        return st;
    }
    *out = a;
    return SL_OK;
}
