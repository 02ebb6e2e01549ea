/* SPDX-License-Identifier: MIT
 * One lot against its plan in flat memory (see sl_analyze_lot_stream in
 * include/splitlot/analyze.h): the lot's devices are kept in the store's
 * scratch, and passes over them give the split summaries, exact robust
 * scales, flags, wafer means, effects and ANOVA, holding state per split and
 * per wafer only; devices and the failure-analysis list are then read back
 * one at a time. Every device is scored by one function (evaluate), whichever
 * pass or reading asks.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_rstat.h>

#include "analyze_internal.h"
#include "splitlot/predict.h"

/* Fewest usable devices in a split for modified z-scores to mean anything
 * (common practice: a median and MAD of fewer points are too unstable). */
#define SL_ANALYZE_MIN_FOR_OUTLIERS 5

/* Running state of one split. */
typedef struct {
    gsl_rstat_workspace *cnp;     /* usable V_cnp */
    gsl_rstat_workspace *doping;  /* their doping, for the ANOVA */
    gsl_rstat_workspace *abs_dev; /* |V_cnp - median|, for the mean absolute deviation */
    sl_stats_median_search *search;
    double median, mad;
    int first_distance_pass;
    sl_stats_robust robust;
} split_state;

struct sl_analysis_stream {
    sl_analysis_owner *owner;     /* the summary */
    sl_layout *layout;
    sl_store_scratch *scratch;    /* the devices, kept under their split */
    split_state *split;
    double *wafer_sum_per_cm2, *wafer_devices; /* per plan wafer: usable, not outliers */
    const sl_store_device_row *row; /* behind device */
    sl_analyze_device device;       /* the one last given */
};

/* The fit class of a device whose neutrality point was extracted. */
static const char fit_ok[] = "ok";

static int is_usable(const sl_store_device_row *r)
{
    return strcmp(r->fit_class, fit_ok) == 0 && isfinite(r->cnp_V);
}

/* ---- plan and predictions ---- */

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

static sl_status alloc_state(sl_analysis_stream *s)
{
    size_t ns = s->owner->pub.n_splits, nw = s->layout->n_wafers;
    s->split = calloc(ns + 1, sizeof *s->split);
    s->wafer_sum_per_cm2 = calloc(nw + 1, sizeof *s->wafer_sum_per_cm2);
    s->wafer_devices = calloc(nw + 1, sizeof *s->wafer_devices);
    if (!s->split || !s->wafer_sum_per_cm2 || !s->wafer_devices)
        return SL_ENOMEM;
    for (size_t k = 0; k < ns; k++) {
        split_state *p = &s->split[k];
        p->cnp = gsl_rstat_alloc();
        p->doping = gsl_rstat_alloc();
        p->abs_dev = gsl_rstat_alloc();
        if (!p->cnp || !p->doping || !p->abs_dev)
            return SL_ENOMEM;
    }
    return SL_OK;
}

/* ---- one device ---- */

/* Doping from a measured V_cnp with the split's planned C_g. */
static double doping_of(const sl_analysis *a, long split, double cnp_V)
{
    return -a->split_capacitance_F_per_m2[split] * cnp_V / SL_SI_ELEMENTARY_CHARGE *
           SL_PER_CM2_PER_PER_M2;
}

static void fill_device(const sl_analysis *a, sl_analyze_device *d, const sl_store_device_row *r,
                        long split)
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
    d->n0_per_cm2 = r->n0_per_cm2;
    d->r_contact_ohm = r->r_contact_ohm;
    d->temperature_K = r->temperature_K;
    d->n_points = r->n_points;
    d->fit_model = r->fit_model;
    d->cnp_measured_V = d->deviation_V = d->z = d->modified_z = d->doping_measured_per_cm2 = NAN;
    if (is_usable(r)) {
        d->cnp_measured_V = r->cnp_V;
        d->deviation_V = r->cnp_V - d->cnp_predicted_V;
        d->doping_measured_per_cm2 = doping_of(a, split, r->cnp_V);
    } else {
        d->flags |= strcmp(r->fit_class, "unmeasured") == 0 ? SL_FLAG_UNMEASURED : SL_FLAG_FIT_CLASS;
    }
}

/* z against the prediction interval and M within the split. */
static void score_device(sl_analyze_device *d, const sl_analyze_split *sp, const sl_stats_robust *robust)
{
    double combined = hypot(d->cnp_predicted_sigma_V, sp->spread_V);
    /* no spread at all (a plan without sigmas, a split of one device):
     * the interval is a point, so any deviation lies outside it */
    if (combined > 0.0)
        d->z = d->deviation_V / combined;
    else
        d->z = d->deviation_V == 0.0 ? 0.0 : copysign(INFINITY, d->deviation_V);
    if (fabs(d->z) > SL_ANALYZE_INTERVAL_SIGMAS)
        d->flags |= SL_FLAG_OFF_PREDICTION;
    if (sp->n_usable >= SL_ANALYZE_MIN_FOR_OUTLIERS) {
        d->modified_z = sl_stats_modified_z_of(robust, d->cnp_measured_V);
        if (fabs(d->modified_z) > SL_STATS_MODIFIED_Z_THRESHOLD)
            d->flags |= SL_FLAG_OUTLIER;
    }
}

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

/* The flag in words, and the severity that orders the failure analysis. */
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

/* Every field of a device, from its row and its split's statistics. */
static void evaluate(sl_analysis_stream *s, const sl_store_device_row *r, long split)
{
    const sl_analysis *a = &s->owner->pub;
    sl_analyze_device *d = &s->device;
    fill_device(a, d, r, split);
    if (isfinite(d->cnp_measured_V))
        score_device(d, &a->splits[split], &s->split[split].robust);
    if (d->flags)
        describe(d);
    s->row = r;
}

/* ---- the passes ---- */

sl_status sl_analyze_lot_changed(const sl_analysis *a, sl_diag *diag)
{
    sl_diag_error(diag, "lot '%s': its devices changed during the analysis", a->lot.lot);
    return SL_EINPUT;
}

typedef struct {
    const char *name;
    size_t index;
} named_wafer;

static int by_name(const void *pa, const void *pb)
{
    return strcmp(((const named_wafer *)pa)->name, ((const named_wafer *)pb)->name);
}

/* The devices on the plan's wafers into the scratch, under their split and
 * wafer, in wafer name order as sl_store_load_devices gives them (devices on
 * wafers the newest plan revision no longer uses are left out). */
static sl_status keep_devices(sl_analysis_stream *s, sl_diag *diag)
{
    const sl_layout *l = s->layout;
    named_wafer *order = malloc((l->n_wafers + 1) * sizeof *order);
    if (!order)
        return SL_ENOMEM;
    for (size_t w = 0; w < l->n_wafers; w++)
        order[w] = (named_wafer){ l->wafers[w].wafer, w };
    qsort(order, l->n_wafers, sizeof *order, by_name);
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < l->n_wafers; i++) {
        const sl_layout_wafer *w = &l->wafers[order[i].index];
        if (w->split >= 0)
            st = sl_store_scratch_keep_wafer(s->scratch, s->owner->pub.lot.lot_id, w->wafer, w->split,
                                             (long)order[i].index, diag);
    }
    free(order);
    return st;
}

/* Every usable V_cnp, with its split, to visit. */
typedef void (*value_visit)(split_state *p, double cnp_V, const sl_analysis *a, long split);

static sl_status each_value(sl_analysis_stream *s, value_visit visit, sl_diag *diag)
{
    long split;
    double v;
    int more;
    sl_status st;
    while ((st = sl_store_scratch_next_value(s->scratch, &more, &split, &v, diag)) == SL_OK && more)
        if (isfinite(v))
            visit(&s->split[split], v, &s->owner->pub, split);
    return st;
}

/* Pass 1: each split's count, mean, SD, range, and its doping's moments. */
static void add_moments(split_state *p, double cnp_V, const sl_analysis *a, long split)
{
    gsl_rstat_add(cnp_V, p->cnp);
    gsl_rstat_add(doping_of(a, split, cnp_V), p->doping);
}

/* Median passes: V_cnp to the split's search; in the MAD phase |V_cnp -
 * median|, whose first pass also feeds the mean absolute deviation. */
static void add_to_search(split_state *p, double cnp_V, const sl_analysis *a, long split)
{
    (void)a, (void)split;
    if (p->search)
        sl_stats_median_search_add(p->search, cnp_V);
}

static void add_distance(split_state *p, double cnp_V, const sl_analysis *a, long split)
{
    (void)a, (void)split;
    double x = fabs(cnp_V - p->median);
    if (p->first_distance_pass)
        gsl_rstat_add(x, p->abs_dev);
    if (p->search)
        sl_stats_median_search_add(p->search, x);
}

/* Passes until every split's search has its median (a pass at least). */
static sl_status search_passes(sl_analysis_stream *s, int mad_phase, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    for (int first = 1, open = 1; open; first = 0) {
        for (size_t k = 0; k < a->n_splits; k++)
            s->split[k].first_distance_pass = first;
        sl_status st = each_value(s, mad_phase ? add_distance : add_to_search, diag);
        open = 0;
        for (size_t k = 0; st == SL_OK && k < a->n_splits; k++) {
            split_state *p = &s->split[k];
            int done = 1;
            if (p->search)
                st = sl_stats_median_search_end_pass(p->search, &done, mad_phase ? &p->mad : &p->median);
            open |= !done;
        }
        if (st == SL_EINPUT)
            return sl_analyze_lot_changed(a, diag);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

/* A search per split with usable devices: for the median over [min, max],
 * for the MAD over [0, largest distance from the median]. */
static sl_status start_searches(sl_analysis_stream *s, int mad_phase)
{
    for (size_t k = 0; k < s->owner->pub.n_splits; k++) {
        split_state *p = &s->split[k];
        size_t n = gsl_rstat_n(p->cnp);
        sl_stats_median_search_free(p->search);
        p->search = NULL;
        if (n == 0)
            continue;
        double lo = gsl_rstat_min(p->cnp), hi = gsl_rstat_max(p->cnp);
        if (mad_phase) {
            hi = fmax(fabs(lo - p->median), fabs(hi - p->median));
            lo = 0.0;
        }
        sl_status st = sl_stats_median_search_new(&p->search, n, lo, hi);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

/* Summary, CI and robust spread of one split from its accumulators. */
static void summarize_split(sl_analysis *a, size_t k, split_state *p)
{
    sl_analyze_split *sp = &a->splits[k];
    size_t n = gsl_rstat_n(p->cnp);
    sp->n_usable = n;
    sp->cnp.n = n;
    sp->cnp.mean = sp->cnp.sd = sp->cnp.ci_low = sp->cnp.ci_high = NAN;
    sp->bias_V = sp->spread_V = sp->flag_low_V = sp->flag_high_V = NAN;
    if (n == 0)
        return;
    sl_stats_summarize_moments(&sp->cnp, n, gsl_rstat_mean(p->cnp), gsl_rstat_sd(p->cnp), 0.95);
    sp->bias_V = sp->cnp.mean - sp->cnp_predicted_V;
    sp->prediction_in_ci = n >= 2 && sp->cnp_predicted_V >= sp->cnp.ci_low &&
                           sp->cnp_predicted_V <= sp->cnp.ci_high;
    sl_stats_robust_from(&p->robust, n, p->median, p->mad, gsl_rstat_mean(p->abs_dev));
    sp->spread_V = p->robust.scale > 0.0 ? p->robust.scale : (n >= 2 ? sp->cnp.sd : 0.0);
    /* the interval score_device flags against, for the report to draw */
    double half = SL_ANALYZE_INTERVAL_SIGMAS * hypot(sp->cnp_predicted_sigma_V, sp->spread_V);
    sp->flag_low_V = sp->cnp_predicted_V - half;
    sp->flag_high_V = sp->cnp_predicted_V + half;
    a->n_usable += n;
    if (sp->cnp.mean < a->split_gate_min_V[k] || sp->cnp.mean > a->split_gate_max_V[k])
        a->n_splits_cnp_outside++;
}

/* The last pass before the devices are read back: each device counted and
 * scored, the flagged ones listed by severity, the usable ones but the
 * outliers summed into their wafer's mean. */
static sl_status add_flags(sl_analysis_stream *s, long split, long wafer, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    const sl_analyze_device *d = &s->device;
    a->n_devices++;
    a->splits[split].n_devices++;
    if (isfinite(d->doping_measured_per_cm2) && !(d->flags & SL_FLAG_OUTLIER)) {
        s->wafer_sum_per_cm2[wafer] += d->doping_measured_per_cm2;
        s->wafer_devices[wafer] += 1.0;
    }
    if (!d->flags)
        return SL_OK;
    a->n_flagged++;
    a->splits[split].n_flagged++;
    return sl_store_scratch_rank(s->scratch, d->severity, diag);
}

static sl_status flags_pass(sl_analysis_stream *s, sl_diag *diag)
{
    const sl_store_device_row *r = NULL;
    long split, wafer;
    sl_status st;
    while ((st = sl_store_scratch_next_kept(s->scratch, &split, &wafer, &r, diag)) == SL_OK && r) {
        evaluate(s, r, split);
        if ((st = add_flags(s, split, wafer, diag)) != SL_OK)
            break;
    }
    if (r)
        sl_store_scratch_rewind(s->scratch);
    return st;
}

/* One-way ANOVA of measured doping across splits, from their moments. */
static sl_status anova_splits(sl_analysis_stream *s)
{
    sl_analysis *a = &s->owner->pub;
    size_t ns = a->n_splits, total = 0;
    size_t *sizes = calloc(ns + 1, sizeof *sizes);
    double *means = calloc(ns + 1, sizeof *means), *variances = calloc(ns + 1, sizeof *variances);
    sl_status st = (sizes && means && variances) ? SL_OK : SL_ENOMEM;
    for (size_t k = 0; st == SL_OK && k < ns; k++) {
        const gsl_rstat_workspace *w = s->split[k].doping;
        sizes[k] = gsl_rstat_n(w);
        means[k] = sizes[k] ? gsl_rstat_mean(w) : NAN;
        variances[k] = sizes[k] > 1 ? gsl_rstat_variance(w) : 0.0;
        total += sizes[k];
    }
    a->anova.f = a->anova.p = NAN;
    if (st == SL_OK && total > 0 && sl_stats_anova_moments(&a->anova, sizes, means, variances, ns) != SL_OK)
        a->anova.f = a->anova.p = NAN;
    free(sizes);
    free(means);
    free(variances);
    return st;
}

static sl_status run_passes(sl_analysis_stream *s, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    sl_status st = keep_devices(s, diag);
    if (st == SL_OK)
        st = sl_store_scratch_keep_values(s->scratch, fit_ok, diag);
    if (st == SL_OK)
        st = each_value(s, add_moments, diag);
    if (st == SL_OK)
        st = start_searches(s, 0);
    if (st == SL_OK)
        st = search_passes(s, 0, diag);
    if (st == SL_OK)
        st = start_searches(s, 1);
    if (st == SL_OK)
        st = search_passes(s, 1, diag);
    for (size_t k = 0; st == SL_OK && k < a->n_splits; k++)
        summarize_split(a, k, &s->split[k]);
    if (st == SL_OK)
        st = flags_pass(s, diag);
    if (st == SL_OK)
        st = anova_splits(s);
    if (st == SL_OK)
        st = sl_analyze_effects(a, s->layout, s->wafer_sum_per_cm2, s->wafer_devices);
    return st;
}

sl_status sl_analyze_lot_stream(sl_analysis_stream **out, sl_store *store, const char *lot,
                                sl_diag *diag)
{
    *out = NULL;
    sl_analysis_stream *s = calloc(1, sizeof *s);
    if (!s || !(s->owner = calloc(1, sizeof *s->owner))) {
        free(s);
        return SL_ENOMEM;
    }
    sl_analysis *a = &s->owner->pub;
    sl_status st = load_plan(a, &s->layout, store, lot, diag);
    if (st == SL_OK)
        st = load_predictions(a, diag);
    if (st == SL_OK)
        st = alloc_state(s);
    if (st == SL_OK)
        st = sl_store_scratch_open(&s->scratch, store, diag);
    if (st == SL_OK)
        st = run_passes(s, diag);
    if (st != SL_OK) {
        sl_analysis_stream_free(s);
        return st;
    }
    *out = s;
    return SL_OK;
}

/* ---- reading devices back ---- */

const sl_analysis *sl_analysis_stream_summary(const sl_analysis_stream *s)
{
    return &s->owner->pub;
}

const sl_store_device_row *sl_analysis_stream_row(const sl_analysis_stream *s)
{
    return s->row;
}

/* The next device a scratch reading gives, evaluated; NULL after the last. */
typedef sl_status (*kept_reading)(sl_store_scratch *scratch, long *group, long *tag,
                                  const sl_store_device_row **row, sl_diag *diag);

static sl_status next_evaluated(sl_analysis_stream *s, kept_reading read,
                                const sl_analyze_device **device, sl_diag *diag)
{
    const sl_store_device_row *r = NULL;
    long split, wafer;
    *device = NULL;
    sl_status st = read(s->scratch, &split, &wafer, &r, diag);
    if (st == SL_OK && r) {
        evaluate(s, r, split);
        *device = &s->device;
    }
    return st;
}

sl_status sl_analysis_stream_next_device(sl_analysis_stream *s, const sl_analyze_device **device,
                                         sl_diag *diag)
{
    return next_evaluated(s, sl_store_scratch_next_kept, device, diag);
}

sl_status sl_analysis_stream_next_flagged(sl_analysis_stream *s, const sl_analyze_device **device,
                                          sl_diag *diag)
{
    return next_evaluated(s, sl_store_scratch_next_ranked, device, diag);
}

void sl_analysis_stream_rewind(sl_analysis_stream *s)
{
    sl_store_scratch_rewind(s->scratch);
}

static void free_state(sl_analysis_stream *s)
{
    for (size_t k = 0; s->split && k < s->owner->pub.n_splits; k++) {
        split_state *p = &s->split[k];
        if (p->cnp)
            gsl_rstat_free(p->cnp);
        if (p->doping)
            gsl_rstat_free(p->doping);
        if (p->abs_dev)
            gsl_rstat_free(p->abs_dev);
        sl_stats_median_search_free(p->search);
    }
    free(s->split);
    free(s->wafer_sum_per_cm2);
    free(s->wafer_devices);
}

sl_analysis_owner *sl_analysis_stream_release(sl_analysis_stream *s)
{
    sl_analysis_owner *owner = s->owner;
    sl_store_scratch_close(s->scratch);
    free_state(s);
    sl_layout_free(s->layout);
    free(s);
    return owner;
}

void sl_analysis_stream_free(sl_analysis_stream *s)
{
    if (s)
        sl_analysis_free(&sl_analysis_stream_release(s)->pub);
}
