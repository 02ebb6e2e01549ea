/* SPDX-License-Identifier: MIT
 * One lot against its plan in flat memory (see sl_analyze_lot_stream in
 * include/splitlot/analyze.h): the view (step and temperature) is chosen,
 * the splits, wafers and predictions are read as the view's plan revision
 * stored them (never recomputed), the lot's current measurements in the
 * view are kept in the store's scratch, and passes over them give each
 * wafer's exact median, each dielectric's pooled MAD of the residuals from
 * the wafer medians, the flags, and each wafer's running moments and
 * censored devices, holding state per wafer, split and dielectric only; the
 * same passes give each split's medians and MADs of mobility, n0 and
 * hysteresis (src/analyze_params.c);
 * src/analyze_wafers.c turns those into split summaries, ANOVA and effects.
 * Devices and the failure-analysis list are then read back one at a time.
 * Every device is scored by one function (evaluate), whichever pass or
 * reading asks.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"
#include "splitlot/physics.h"

/* Fewest usable devices for modified z-scores to mean anything (common
 * practice: a median and MAD of fewer points are too unstable): on the
 * device's wafer, and pooled over its dielectric's wafers. */
#define SL_ANALYZE_MIN_PER_WAFER 3

/* Running state of one dielectric: the MAD of the residuals from the wafer
 * medians, pooled over its wafers. */
typedef struct {
    size_t n;                     /* residuals pooled */
    double max_distance_V;        /* the largest |residual| */
    double sum_abs_V;             /* for the mean absolute deviation */
    sl_stats_median_search *search;
    double mad_V;
    sl_stats_robust robust;       /* of the residuals: median 0 */
} dielectric_state;

/* The sweep end each censored device's neutrality point lies beyond, kept
 * by measurement id so that the passes read its sweep once (on a server, a
 * round trip a device and pass): open addressing, linear probing, at most
 * half full; grows with the censored devices only. */
typedef struct {
    long id; /* 0: a free slot */
    int above;
    double bound_V;
} censor_entry;

typedef struct {
    censor_entry *slot;
    size_t cap, n; /* cap a power of two */
} censor_memo;

static censor_entry *censor_slot(const censor_memo *m, long id)
{
    size_t i = ((unsigned long)id * 0x9E3779B97F4A7C15ull) & (m->cap - 1);
    while (m->slot[i].id != 0 && m->slot[i].id != id)
        i = (i + 1) & (m->cap - 1);
    return &m->slot[i];
}

/* Keep id's bound; out of memory only costs a later read again. */
static void censor_memo_put(censor_memo *m, long id, int above, double bound_V)
{
    if (2 * (m->n + 1) > m->cap) {
        censor_memo grown = { calloc(m->cap ? 2 * m->cap : 64, sizeof *grown.slot),
                              m->cap ? 2 * m->cap : 64, 0 };
        if (!grown.slot)
            return;
        for (size_t i = 0; i < m->cap; i++)
            if (m->slot[i].id != 0) {
                *censor_slot(&grown, m->slot[i].id) = m->slot[i];
                grown.n++;
            }
        free(m->slot);
        *m = grown;
    }
    censor_entry *e = censor_slot(m, id);
    m->n += e->id == 0;
    *e = (censor_entry){ id, above, bound_V };
}

static const censor_entry *censor_memo_get(const censor_memo *m, long id)
{
    if (m->cap == 0 || id == 0)
        return NULL;
    const censor_entry *e = censor_slot(m, id);
    return e->id == id ? e : NULL;
}

struct sl_analysis_stream {
    sl_analysis_owner *owner;     /* the summary */
    sl_layout *layout;
    sl_store *store;              /* sweeps of censored devices */
    sl_store_scratch *scratch;    /* the devices, kept under their wafer */
    sl_analyze_wafer *wafer;      /* per plan wafer */
    sl_stats_median_search **wafer_search;
    dielectric_state *dielectric;
    analyze_param_state *params;  /* per split: mobility, n0, hysteresis */
    censor_memo censored;         /* the censored devices' bounds, read once */
    int first_pass;               /* of a phase of median searches */
    const sl_store_device_row *row; /* behind device */
    sl_analyze_device device;       /* the one last given */
};

/* The fit class of a device whose neutrality point was extracted. */
static const char fit_ok[] = "ok";

static int is_usable(const sl_store_device_row *r)
{
    return strcmp(r->fit_class, fit_ok) == 0 && isfinite(r->cnp_V);
}

/* ---- the view, the plan and what its revision stored ---- */

/* A temperature among the stored ones (within 0.5 K, as an import takes
 * them): its index, or -1. */
static long temperature_index(const sl_store_revision *rev, double temperature_K)
{
    for (size_t t = 0; t < rev->n_temperatures; t++)
        if (fabs(rev->temperatures_K[t] - temperature_K) <= 0.5)
            return (long)t;
    return -1;
}

/* A step asked for that none of the lot's runs measured (a lot with runs):
 * SL_ENOTFOUND, naming the steps it has. */
static sl_status step_measured(const sl_analysis *a, const char *step, sl_diag *diag)
{
    char steps[256] = "";
    size_t k = 0;
    for (size_t i = 0; i < a->n_runs; i++) {
        if (strcmp(a->runs[i].step, step) == 0)
            return SL_OK;
        int seen = 0;
        for (size_t j = 0; j < i && !seen; j++)
            seen = strcmp(a->runs[j].step, a->runs[i].step) == 0;
        if (!seen && k < sizeof steps)
            k += (size_t)snprintf(steps + k, sizeof steps - k, "%s%s", k ? ", " : "",
                                  a->runs[i].step);
    }
    if (a->n_runs == 0)
        return SL_OK; /* nothing measured yet: an empty view */
    sl_diag_error(diag, "lot %s has no measurements at step '%s' (steps: %s)", a->lot.lot, step,
                  steps);
    return SL_ENOTFOUND;
}

/* The step and temperature shown, and the revision of the view's newest
 * run (the lot's newest revision when the view has no run). */
static sl_status choose_view(sl_analysis *a, long *revision_id, sl_store *store,
                             const sl_analyze_view *view, sl_diag *diag)
{
    sl_store_revision newest;
    sl_status st = view && view->step ? step_measured(a, view->step, diag) : SL_OK;
    if (st == SL_OK)
        st = sl_store_load_revision(store, &newest, a->lot.revision_id, diag);
    if (st != SL_OK)
        return st;
    st = sl_store_default_view(store, a->step, &a->temperature_K, a->lot.lot_id,
                               view ? view->step : NULL, newest.temperatures_K,
                               newest.n_temperatures, diag);
    if (st == SL_OK && view && !isnan(view->temperature_K)) {
        long t = temperature_index(&newest, view->temperature_K);
        a->temperature_K = t >= 0 ? newest.temperatures_K[t] : view->temperature_K;
        if (t < 0) {
            char allowed[256];
            size_t k = 0;
            for (size_t t = 0; t < newest.n_temperatures && k < sizeof allowed; t++)
                k += (size_t)snprintf(allowed + k, sizeof allowed - k, "%s%g", t ? ", " : "",
                                      newest.temperatures_K[t]);
            sl_diag_error(diag, "lot '%s': %g K is not one of its plan's temperatures (%s K)",
                          a->lot.lot, a->temperature_K, allowed);
            st = SL_ENOTFOUND;
        }
    }
    sl_store_revision_clear(&newest);
    if (st == SL_OK)
        st = sl_store_view_revision(store, revision_id, &a->lot, a->step, a->temperature_K, diag);
    return st;
}

/* The plan text the view's revision stored (not the lot's newest: planned
 * levels and tolerances are the revision's), parsed for its factors,
 * levels and names; its splits must be the stored revision's, in order. */
static sl_status load_plan(sl_analysis *a, sl_store *store, const sl_store_revision *rev,
                           sl_diag *diag)
{
    sl_status st = sl_store_load_lot_revision(store, &a->view_revision, &a->lot, rev->revision_id,
                                              diag);
    if (st != SL_OK)
        return st;
    const sl_store_lot *v = &a->view_revision;
    size_t before = sl_diag_size(diag);
    st = sl_plan_parse(&a->plan, v->plan_text, strlen(v->plan_text), v->plan_name, diag);
    int same = st == SL_OK && a->plan->n_splits == rev->n_splits;
    for (size_t i = 0; same && i < rev->n_splits; i++)
        same = strcmp(a->plan->splits[i].name, rev->splits[i].name) == 0;
    if (st != SL_OK || !same) {
        sl_diag_error(diag, "lot '%s': its stored plan %s", a->lot.lot,
                      st != SL_OK ? "no longer loads" : "no longer matches its stored splits");
        return SL_EDB;
    }
    sl_diag_truncate(diag, before); /* the plan's warnings were shown when it was stored */
    return SL_OK;
}

/* The layout as the revision stored it: each wafer's split. */
static sl_status stored_layout(sl_layout **out, const sl_store_revision *rev)
{
    sl_layout *l = calloc(1, sizeof *l);
    if (!l)
        return SL_ENOMEM;
    *out = l;
    l->wafers = calloc(rev->n_wafers + 1, sizeof *l->wafers);
    l->splits = calloc(rev->n_splits + 1, sizeof *l->splits);
    if (!l->wafers || !l->splits)
        return SL_ENOMEM;
    l->n_splits = rev->n_splits;
    for (size_t s = 0; s < rev->n_splits; s++)
        if (!(l->splits[s].wafers = calloc(rev->n_wafers + 1, sizeof(size_t))))
            return SL_ENOMEM;
    for (size_t w = 0; w < rev->n_wafers; w++, l->n_wafers++) {
        sl_layout_wafer *lw = &l->wafers[w];
        if (!(lw->wafer = strdup(rev->wafers[w].name)))
            return SL_ENOMEM;
        lw->split = rev->wafers[w].split;
        lw->process_order = (size_t)rev->wafers[w].process_order;
        if (lw->split >= 0) {
            sl_layout_split *sp = &l->splits[lw->split];
            sp->wafers[sp->n_wafers++] = w;
        }
    }
    return SL_OK;
}

/* Each wafer's load in every batched step of the plan, as the revision
 * stored them (layout wafers' load, 1-based, 0 for none). */
static sl_status stored_loads(sl_layout *l, const sl_plan *plan, sl_store *store,
                              const sl_store_revision *rev, sl_diag *diag)
{
    size_t nb = plan->n_batches;
    if (nb == 0)
        return SL_OK;
    long *loads = calloc(rev->n_wafers * nb + 1, sizeof *loads);
    const char **steps = calloc(nb, sizeof *steps);
    sl_status st = loads && steps ? SL_OK : SL_ENOMEM;
    for (size_t b = 0; st == SL_OK && b < nb; b++)
        steps[b] = plan->batches[b].step;
    if (st == SL_OK)
        st = sl_store_load_wafer_loads(store, loads, rev, steps, nb, diag);
    for (size_t w = 0; st == SL_OK && w < l->n_wafers; w++) {
        if (!(l->wafers[w].load = calloc(nb, sizeof *l->wafers[w].load)))
            st = SL_ENOMEM;
        for (size_t b = 0; st == SL_OK && b < nb; b++)
            l->wafers[w].load[b] = loads[w * nb + b] > 0 ? (size_t)loads[w * nb + b] : 0;
    }
    free(loads);
    free(steps);
    return st;
}

/* Predicted neutrality point, gate range, C_g and thermal floor per split,
 * as stored for the view's temperature. */
static sl_status load_predictions(sl_analysis *a, const sl_store_revision *rev)
{
    size_t ns = rev->n_splits, nt = rev->n_temperatures;
    long t = temperature_index(rev, a->temperature_K);
    if (t < 0)
        t = 0; /* a revision without the view's temperature: its V_cnp is the same */
    a->splits = calloc(ns ? ns : 1, sizeof *a->splits);
    a->split_gate_min_V = calloc(ns ? ns : 1, sizeof(double));
    a->split_gate_max_V = calloc(ns ? ns : 1, sizeof(double));
    a->split_capacitance_F_per_m2 = calloc(ns ? ns : 1, sizeof(double));
    a->split_floor_per_cm2 = calloc(ns ? ns : 1, sizeof(double));
    if (!a->splits || !a->split_gate_min_V || !a->split_gate_max_V ||
        !a->split_capacitance_F_per_m2 || !a->split_floor_per_cm2)
        return SL_ENOMEM;
    a->n_splits = ns;
    for (size_t s = 0; s < ns; s++) {
        const sl_prediction *p = &rev->predictions[s * nt + (size_t)t];
        a->splits[s].split = s;
        a->splits[s].cnp_predicted_V = p->cnp_V.val;
        a->splits[s].cnp_predicted_sigma_V = p->cnp_V.sigma;
        a->split_gate_min_V[s] = p->gate_min_V;
        a->split_gate_max_V[s] = p->gate_max_V;
        a->split_capacitance_F_per_m2[s] = p->gate_capacitance_F_per_m2;
        a->split_floor_per_cm2[s] = p->thermal_floor_per_cm2;
        a->splits[s].window_predicted_per_cm2[0] = p->max_electron_density_per_cm2;
        a->splits[s].window_predicted_per_cm2[1] = p->max_hole_density_per_cm2;
    }
    return SL_OK;
}

/* The lot, its view, runs, plan and stored revision. */
static sl_status load_lot(sl_analysis_stream *s, sl_store *store, const char *lot,
                          const sl_analyze_view *view, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    sl_store_revision rev = { 0 };
    long revision_id = 0;
    sl_status st = sl_store_find_lot(store, &a->lot, lot, diag);
    if (st == SL_OK)
        st = sl_store_list_runs(store, &a->runs, &a->n_runs, a->lot.lot_id, diag);
    if (st == SL_OK)
        st = choose_view(a, &revision_id, store, view, diag);
    if (st == SL_OK)
        st = sl_store_load_revision(store, &rev, revision_id, diag);
    a->revision = a->lot.revision;
    for (size_t i = 0; i < a->n_runs; i++)
        if (a->runs[i].revision_id == revision_id)
            a->revision = a->runs[i].revision;
    if (st == SL_OK)
        st = load_plan(a, store, &rev, diag);
    if (st == SL_OK)
        st = stored_layout(&s->layout, &rev);
    if (st == SL_OK)
        st = stored_loads(s->layout, a->plan, store, &rev, diag);
    if (st == SL_OK)
        st = load_predictions(a, &rev);
    sl_store_revision_clear(&rev);
    return st;
}

static sl_status alloc_state(sl_analysis_stream *s)
{
    size_t nw = s->layout->n_wafers, nd = s->owner->pub.plan->n_dielectrics;
    s->wafer = calloc(nw + 1, sizeof *s->wafer);
    s->wafer_search = calloc(nw + 1, sizeof *s->wafer_search);
    s->dielectric = calloc(nd + 1, sizeof *s->dielectric);
    s->params = calloc((s->layout->n_splits + 1) * SL_ANALYZE_N_PARAMS, sizeof *s->params);
    if (!s->wafer || !s->wafer_search || !s->dielectric || !s->params)
        return SL_ENOMEM;
    for (size_t w = 0; w < nw; w++)
        s->wafer[w].split = s->layout->wafers[w].split;
    return SL_OK;
}

/* ---- one device ---- */

/* Doping from a measured V_cnp with the split's planned C_g: -C_g V / e. */
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
    d->run_id = r->run_id;
    d->measurements = r->measurements;
    d->fit_model = r->fit_model;
    d->n0_per_cm2 = r->n0_per_cm2;
    d->r_contact_ohm = r->r_contact_ohm;
    d->hysteresis_V = r->hysteresis_V;
    d->floor_predicted_per_cm2 = hypot(a->split_floor_per_cm2[split],
                                       a->plan->disorder_density_per_cm2);
    d->channel_length_um = isnan(r->channel_length_um) ? a->plan->channel_length_um
                                                       : r->channel_length_um;
    d->channel_width_um = isnan(r->channel_width_um) ? a->plan->channel_width_um
                                                     : r->channel_width_um;
    d->n_points = r->n_points;
    d->electron_mobility_cm2_per_Vs = r->electron_mobility_cm2_per_Vs;
    d->hole_mobility_cm2_per_Vs = r->hole_mobility_cm2_per_Vs;
    d->cnp_measured_V = d->deviation_V = d->z = d->modified_z = d->doping_measured_per_cm2 = NAN;
    if (fabs(r->hysteresis_V) > a->plan->max_hysteresis_V) /* NaN: no limit, or none */
        d->flags |= SL_FLAG_HYSTERESIS;
    if (is_usable(r)) {
        d->cnp_measured_V = r->cnp_V;
        d->deviation_V = r->cnp_V - d->cnp_predicted_V;
        d->doping_measured_per_cm2 = doping_of(a, split, r->cnp_V);
    } else {
        d->flags |= strcmp(r->fit_class, "unmeasured") == 0 ? SL_FLAG_UNMEASURED : SL_FLAG_FIT_CLASS;
    }
}

/* The dielectric of a split. */
static dielectric_state *dielectric_of(sl_analysis_stream *s, long split)
{
    return &s->dielectric[s->owner->pub.plan->splits[split].dielectric];
}

/* z against the prediction interval; M of the residual from the wafer
 * median, scaled by the dielectric's pooled MAD. */
static void score_device(sl_analysis_stream *s, sl_analyze_device *d, long wafer)
{
    const sl_analyze_split *sp = &s->owner->pub.splits[d->split];
    double combined = hypot(d->cnp_predicted_sigma_V, sp->spread_V);
    /* no spread at all (a plan without sigmas, a split of one device):
     * the interval is a point, so any deviation lies outside it */
    if (combined > 0.0)
        d->z = d->deviation_V / combined;
    else
        d->z = d->deviation_V == 0.0 ? 0.0 : copysign(INFINITY, d->deviation_V);
    if (fabs(d->z) > SL_ANALYZE_INTERVAL_SIGMAS)
        d->flags |= SL_FLAG_OFF_PREDICTION;
    const dielectric_state *g = dielectric_of(s, d->split);
    const sl_analyze_wafer *w = &s->wafer[wafer];
    if (w->n_usable >= SL_ANALYZE_MIN_PER_WAFER && g->n >= SL_ANALYZE_MIN_FOR_OUTLIERS) {
        d->modified_z = sl_stats_modified_z_of(&g->robust, d->cnp_measured_V - w->median_V);
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

/* The flag in words, and the severity that orders the failure analysis
 * (a residual density below the floor ranks after the off-prediction and
 * outlier flags, before nothing). */
static void describe(sl_analyze_device *d, double floor_per_cm2, double temperature_K,
                     double max_hysteresis_V, double mobility_median_cm2_per_Vs)
{
    if (d->flags & (SL_FLAG_FIT_CLASS | SL_FLAG_UNMEASURED)) {
        int k = snprintf(d->reason, sizeof d->reason, "%s", class_reason(d->fit_class));
        if (d->flags & SL_FLAG_OUTLIER && k > 0 && (size_t)k < sizeof d->reason)
            snprintf(d->reason + k, sizeof d->reason - (size_t)k,
                     "; already at the sweep's end %s the other devices of its wafer (modified "
                     "z %.1f), left out of the wafer mean",
                     d->modified_z > 0 ? "far above" : "far below", d->modified_z);
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
        k += (size_t)snprintf(d->reason + k, sizeof d->reason - k,
                              "%s%s the other devices of its wafer (modified z %.1f)", k ? "; " : "",
                              d->modified_z > 0 ? "far above" : "far below", d->modified_z);
    if (d->flags & SL_FLAG_BELOW_FLOOR && k < sizeof d->reason)
        k += (size_t)snprintf(d->reason + k, sizeof d->reason - k,
                              "%sresidual density %.3g cm^-2 below the thermal floor %.3g cm^-2 "
                              "at %g K (the fit or the temperature is wrong)",
                              k ? "; " : "", d->n0_per_cm2, floor_per_cm2, temperature_K);
    if (d->flags & SL_FLAG_HYSTERESIS && k < sizeof d->reason)
        k += (size_t)snprintf(d->reason + k, sizeof d->reason - k,
                              "%shysteresis %.2f V, beyond the plan's %.2f V", k ? "; " : "",
                              d->hysteresis_V, max_hysteresis_V);
    if (d->flags & SL_FLAG_LOW_MOBILITY && k < sizeof d->reason)
        snprintf(d->reason + k, sizeof d->reason - k,
                 "%smobility %.4g cm^2/Vs far below its split's median %.4g (modified z %.1f)",
                 k ? "; " : "", d->mobility_cm2_per_Vs, mobility_median_cm2_per_Vs,
                 d->mobility_modified_z);
    d->severity = fmax(isfinite(d->z) ? fabs(d->z) : 0.0,
                       isfinite(d->modified_z) ? fabs(d->modified_z) : 0.0);
    if (d->flags == SL_FLAG_BELOW_FLOOR)
        d->severity = 1.0 - d->n0_per_cm2 / floor_per_cm2; /* 0..1: after the others */
    if (d->flags & SL_FLAG_OFF_PREDICTION)
        d->severity += 100.0;
    if (d->flags == SL_FLAG_HYSTERESIS) /* by how far beyond the limit */
        d->severity = fabs(d->hysteresis_V) / max_hysteresis_V;
    if (d->flags & SL_FLAG_LOW_MOBILITY && !(d->flags & SL_FLAG_OFF_PREDICTION))
        d->severity = fmax(d->flags == SL_FLAG_LOW_MOBILITY ? 0.0 : d->severity,
                           fabs(d->mobility_modified_z)); /* on the outliers' scale */
}

/* Every field of a device, from its row and its wafer's and dielectric's
 * statistics. */
static void score_censored(sl_analysis_stream *s, sl_analyze_device *d, long wafer);

static void evaluate(sl_analysis_stream *s, const sl_store_device_row *r, long wafer)
{
    const sl_analysis *a = &s->owner->pub;
    sl_analyze_device *d = &s->device;
    long split = s->wafer[wafer].split;
    s->row = r; /* before scoring: a censored device's side reads it */
    fill_device(a, d, r, split);
    if (isfinite(d->cnp_measured_V))
        score_device(s, d, wafer);
    else if (strcmp(d->fit_class, "cnp-outside-sweep") == 0)
        score_censored(s, d, wafer);
    /* below the thermal floor no sample can be: n = p = n_th at neutrality */
    if (isfinite(d->n0_per_cm2) && d->n0_per_cm2 < a->split_floor_per_cm2[split])
        d->flags |= SL_FLAG_BELOW_FLOOR;
    /* one-sided: a low mobility is the failure (modified z, Iglewicz and Hoaglin 1993) */
    d->mobility_modified_z = NAN;
    if (isfinite(d->cnp_measured_V))
        d->mobility_modified_z = sl__analyze_mobility_modified_z(s->params, split,
                                                             d->mobility_cm2_per_Vs);
    if (d->mobility_modified_z < -SL_STATS_MODIFIED_Z_THRESHOLD)
        d->flags |= SL_FLAG_LOW_MOBILITY;
    if (d->flags)
        describe(d, a->split_floor_per_cm2[split], a->temperature_K, a->plan->max_hysteresis_V,
                 a->splits[split].mobility_median_cm2_per_Vs);
    s->row = r;
}

/* ---- the passes ---- */

sl_status sl__analyze_lot_changed(const sl_analysis *a, sl_diag *diag)
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

/* The current measurement in the view of the devices on the revision's
 * wafers into the scratch, under their wafer (group) and split (tag), in
 * wafer name order as sl_store_load_devices gives them (devices on wafers
 * the revision no longer uses are left out). */
static sl_status keep_devices(sl_analysis_stream *s, sl_diag *diag)
{
    const sl_layout *l = s->layout;
    named_wafer *order = malloc((l->n_wafers + 1) * sizeof *order);
    if (!order)
        return SL_ENOMEM;
    for (size_t w = 0; w < l->n_wafers; w++)
        order[w] = (named_wafer){ l->wafers[w].wafer, w };
    qsort(order, l->n_wafers, sizeof *order, by_name);
    const sl_analysis *a = &s->owner->pub;
    sl_status st = sl_store_scratch_view(s->scratch, a->lot.lot_id, a->step, a->temperature_K, diag);
    for (size_t i = 0; st == SL_OK && i < l->n_wafers; i++) {
        const sl_layout_wafer *w = &l->wafers[order[i].index];
        if (w->split >= 0)
            st = sl_store_scratch_keep_wafer(s->scratch, s->owner->pub.lot.lot_id, w->wafer,
                                             (long)order[i].index, w->split, diag);
    }
    free(order);
    return st;
}

/* Pass 1: each wafer's count and range of usable V_cnp. */
static void add_range(sl_analysis_stream *s, long wafer, double cnp_V)
{
    sl_analyze_wafer *w = &s->wafer[wafer];
    w->min_V = w->n_usable ? fmin(w->min_V, cnp_V) : cnp_V;
    w->max_V = w->n_usable ? fmax(w->max_V, cnp_V) : cnp_V;
    w->n_usable++;
}

/* Median passes: V_cnp to its wafer's search. */
static void add_to_wafer_search(sl_analysis_stream *s, long wafer, double cnp_V)
{
    if (s->wafer_search[wafer])
        sl_stats_median_search_add(s->wafer_search[wafer], cnp_V);
}

/* MAD passes: |V_cnp - wafer median| of the wafers the outlier rule scores
 * to their dielectric's search; the first also sums them. */
static void add_residual(sl_analysis_stream *s, long wafer, double cnp_V)
{
    const sl_analyze_wafer *w = &s->wafer[wafer];
    if (w->n_usable < SL_ANALYZE_MIN_PER_WAFER)
        return;
    dielectric_state *g = dielectric_of(s, w->split);
    double x = fabs(cnp_V - w->median_V);
    if (s->first_pass)
        g->sum_abs_V += x;
    if (g->search)
        sl_stats_median_search_add(g->search, x);
}

/* One pass over the kept values: each finite V_cnp to its wafer's range or
 * search (median phase) or, as its residual from the wafer median, to its
 * dielectric's search (MAD phase); each device's parameters to its split's
 * state in the same phase. */
static sl_status each_value(sl_analysis_stream *s, analyze_pass pass, sl_diag *diag)
{
    size_t n_splits = s->owner->pub.n_splits;
    sl_store_scratch_value v;
    int more;
    sl_status st;
    while ((st = sl_store_scratch_next_value(s->scratch, &more, &v, diag)) == SL_OK && more) {
        if (isfinite(v.cnp_V)) {
            if (pass == SL__ANALYZE_PASS_RANGE)
                add_range(s, v.group, v.cnp_V);
            else if (pass == SL__ANALYZE_PASS_MEDIAN)
                add_to_wafer_search(s, v.group, v.cnp_V);
            else
                add_residual(s, v.group, v.cnp_V);
        }
        sl__analyze_params_visit(s->params, n_splits, pass, &v);
    }
    return st;
}

/* End a pass of one search; *open |= not done yet. */
static sl_status end_pass(sl_stats_median_search *search, double *median, int *open)
{
    int done = 1;
    sl_status st = search ? sl_stats_median_search_end_pass(search, &done, median) : SL_OK;
    *open |= !done;
    return st;
}

/* Passes of a median or MAD phase until every search has its median (a
 * pass at least): the wafers' or dielectrics' and the splits' parameters'
 * together. */
static sl_status search_passes(sl_analysis_stream *s, analyze_pass pass, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    int residuals = pass == SL__ANALYZE_PASS_MAD;
    for (int open = 1; open; s->first_pass = 0) {
        sl_status st = each_value(s, pass, diag);
        open = 0;
        for (size_t w = 0; !residuals && st == SL_OK && w < s->layout->n_wafers; w++)
            st = end_pass(s->wafer_search[w], &s->wafer[w].median_V, &open);
        for (size_t d = 0; residuals && st == SL_OK && d < a->plan->n_dielectrics; d++)
            st = end_pass(s->dielectric[d].search, &s->dielectric[d].mad_V, &open);
        if (st == SL_OK)
            st = sl__analyze_params_end_pass(s->params, a->n_splits, pass, &open);
        if (st == SL_EINPUT)
            return sl__analyze_lot_changed(a, diag);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

/* A median search for every wafer with usable devices, over its range, and
 * for every split's parameters. */
static sl_status wafer_medians(sl_analysis_stream *s, sl_diag *diag)
{
    sl_status st = SL_OK;
    for (size_t w = 0; st == SL_OK && w < s->layout->n_wafers; w++)
        if (s->wafer[w].n_usable)
            st = sl_stats_median_search_new(&s->wafer_search[w], s->wafer[w].n_usable,
                                            s->wafer[w].min_V, s->wafer[w].max_V);
    if (st == SL_OK)
        st = sl__analyze_params_start(s->params, s->owner->pub.n_splits, SL__ANALYZE_PASS_MEDIAN);
    s->first_pass = 1;
    if (st == SL_OK)
        st = search_passes(s, SL__ANALYZE_PASS_MEDIAN, diag);
    for (size_t w = 0; w < s->layout->n_wafers; w++) {
        sl_stats_median_search_free(s->wafer_search[w]);
        s->wafer_search[w] = NULL;
    }
    sl__analyze_params_stop(s->params, s->owner->pub.n_splits);
    return st;
}

/* Each dielectric's MAD of the residuals pooled over its scored wafers, and
 * each split's parameters' MADs (their medians and spreads published). */
static sl_status dielectric_mads(sl_analysis_stream *s, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    for (size_t w = 0; w < s->layout->n_wafers; w++) {
        const sl_analyze_wafer *wf = &s->wafer[w];
        if (wf->split < 0 || wf->n_usable < SL_ANALYZE_MIN_PER_WAFER)
            continue;
        dielectric_state *g = dielectric_of(s, wf->split);
        g->n += wf->n_usable;
        g->max_distance_V = fmax(g->max_distance_V, fmax(fabs(wf->min_V - wf->median_V),
                                                         fabs(wf->max_V - wf->median_V)));
    }
    sl_status st = SL_OK;
    for (size_t d = 0; st == SL_OK && d < a->plan->n_dielectrics; d++)
        if (s->dielectric[d].n)
            st = sl_stats_median_search_new(&s->dielectric[d].search, s->dielectric[d].n, 0.0,
                                            s->dielectric[d].max_distance_V);
    if (st == SL_OK)
        st = sl__analyze_params_start(s->params, a->n_splits, SL__ANALYZE_PASS_MAD);
    s->first_pass = 1;
    if (st == SL_OK)
        st = search_passes(s, SL__ANALYZE_PASS_MAD, diag);
    sl__analyze_params_stop(s->params, a->n_splits);
    if (st == SL_OK)
        sl__analyze_params_publish(s->params, a);
    for (size_t d = 0; d < a->plan->n_dielectrics; d++) {
        dielectric_state *g = &s->dielectric[d];
        sl_stats_median_search_free(g->search);
        g->search = NULL;
        if (g->n)
            sl_stats_robust_from(&g->robust, g->n, 0.0, g->mad_V, g->sum_abs_V / (double)g->n);
    }
    /* the device spread of the off-prediction interval: about the wafer medians */
    for (size_t k = 0; k < a->n_splits; k++) {
        sl_analyze_split *sp = &a->splits[k];
        sp->spread_V = dielectric_of(s, (long)k)->robust.scale;
        /* the interval score_device flags against, for the report to draw */
        double half = SL_ANALYZE_INTERVAL_SIGMAS * hypot(sp->cnp_predicted_sigma_V, sp->spread_V);
        sp->flag_low_V = sp->cnp_predicted_V - half;
        sp->flag_high_V = sp->cnp_predicted_V + half;
    }
    return st;
}

/* The robust scale a device of this wafer is scored with, NULL when the
 * wafer or its dielectric has too few devices for the outlier rule. */
static const sl_stats_robust *outlier_scale(sl_analysis_stream *s, long wafer)
{
    const dielectric_state *g = dielectric_of(s, s->wafer[wafer].split);
    return s->wafer[wafer].n_usable >= SL_ANALYZE_MIN_PER_WAFER && g->n >= SL_ANALYZE_MIN_FOR_OUTLIERS
               ? &g->robust
               : NULL;
}

/* A censored device: which end of its sweep the neutrality point lies
 * beyond (the end where the resistance is higher, the curve still rising
 * towards its peak). Without a stored sweep, the split's gate range and
 * the side of its prediction stand in. A bound already beyond the wafer's
 * outlier limit makes it a known outlier, out of the wafer mean. */
static sl_status censor_bound(sl_analysis_stream *s, const sl_analyze_device *d, int *above,
                              double *bound_V, sl_diag *diag)
{
    const censor_entry *kept = censor_memo_get(&s->censored, d->device_id);
    if (kept) {
        *above = kept->above;
        *bound_V = kept->bound_V;
        return SL_OK;
    }
    double *vg = NULL, *r = NULL;
    size_t n = 0;
    const sl_analysis *a = &s->owner->pub;
    sl_status st = sl_store_load_sweep(s->store, &vg, &r, &n, d->device_id, diag);
    if (st == SL_OK && n >= 2) {
        size_t lo = 0, hi = 0;
        for (size_t i = 1; i < n; i++) {
            lo = vg[i] < vg[lo] ? i : lo;
            hi = vg[i] > vg[hi] ? i : hi;
        }
        *above = r[hi] > r[lo];
        *bound_V = *above ? vg[hi] : vg[lo];
    } else if (st == SL_OK || st == SL_ENOTFOUND) {
        double lo = a->split_gate_min_V[d->split], hi = a->split_gate_max_V[d->split];
        /* a results file's reported value says which end; else the prediction's side */
        double cnp_V = s->row && isfinite(s->row->cnp_V) ? s->row->cnp_V : d->cnp_predicted_V;
        *above = cnp_V > 0.5 * (lo + hi);
        *bound_V = *above ? hi : lo;
        st = SL_OK;
    }
    free(vg);
    free(r);
    if (st == SL_OK && d->device_id != 0)
        censor_memo_put(&s->censored, d->device_id, *above, *bound_V);
    return st;
}

static sl_status censor_device(sl_analysis_stream *s, const sl_analyze_device *d, long wafer,
                               sl_diag *diag)
{
    int above = 0;
    double bound_V = NAN;
    sl_status st = censor_bound(s, d, &above, &bound_V, diag);
    if (st == SL_OK)
        sl__analyze_wafer_censor_scored(&s->wafer[wafer], outlier_scale(s, wafer), above, bound_V);
    return st;
}

/* The same rule for the device itself: flagged an outlier, with the
 * modified z of its bound (its own lies further out), when the bound is
 * beyond the limit; as censor_device decides, from the same inputs. */
static void score_censored(sl_analysis_stream *s, sl_analyze_device *d, long wafer)
{
    const sl_stats_robust *robust = outlier_scale(s, wafer);
    int above = 0;
    double bound_V = NAN;
    if (!robust || censor_bound(s, d, &above, &bound_V, NULL) != SL_OK)
        return;
    double m = sl_stats_modified_z_of(robust, bound_V - s->wafer[wafer].median_V);
    if (above ? m > SL_STATS_MODIFIED_Z_THRESHOLD : m < -SL_STATS_MODIFIED_Z_THRESHOLD) {
        d->flags |= SL_FLAG_OUTLIER;
        d->modified_z = m;
    }
}

/* The last pass before the devices are read back: each device counted and
 * scored, the flagged ones listed by severity, the usable ones but the
 * outliers into their wafer's moments, the censored ones to its bounds. */
static sl_status add_flags(sl_analysis_stream *s, long wafer, sl_diag *diag)
{
    sl_analysis *a = &s->owner->pub;
    const sl_analyze_device *d = &s->device;
    sl_analyze_split *sp = &a->splits[d->split];
    a->n_devices++;
    sp->n_devices++;
    a->n_with_hysteresis += isfinite(d->hysteresis_V);
    if (isfinite(d->cnp_measured_V)) {
        sp->n_usable++;
        a->n_usable++;
        a->n_outlier_scored += isfinite(d->modified_z);
        if (!(d->flags & SL_FLAG_OUTLIER))
            sl__analyze_wafer_add(&s->wafer[wafer], d->cnp_measured_V);
    } else if (strcmp(d->fit_class, "cnp-outside-sweep") == 0) {
        sl_status st = censor_device(s, d, wafer, diag);
        if (st != SL_OK)
            return st;
    }
    if (!d->flags)
        return SL_OK;
    a->n_flagged++;
    sp->n_flagged++;
    return sl_store_scratch_rank(s->scratch, d->severity, diag);
}

static sl_status flags_pass(sl_analysis_stream *s, sl_diag *diag)
{
    const sl_store_device_row *r = NULL;
    long split, wafer;
    sl_status st;
    while ((st = sl_store_scratch_next_kept(s->scratch, &wafer, &split, &r, diag)) == SL_OK && r) {
        evaluate(s, r, wafer);
        if ((st = add_flags(s, wafer, diag)) != SL_OK)
            break;
    }
    if (r)
        sl_store_scratch_rewind(s->scratch);
    /* |M| > 3.5 of a normal residual: 2 Q(3.5) of the devices scored */
    s->owner->pub.outliers_expected = (double)s->owner->pub.n_outlier_scored *
                                      sl_stats_z_p_two_sided(SL_STATS_MODIFIED_Z_THRESHOLD);
    return st;
}

static sl_status run_passes(sl_analysis_stream *s, sl_diag *diag)
{
    sl_status st = keep_devices(s, diag);
    if (st == SL_OK)
        st = sl_store_scratch_keep_values(s->scratch, fit_ok, diag);
    if (st == SL_OK)
        st = each_value(s, SL__ANALYZE_PASS_RANGE, diag);
    if (st == SL_OK)
        st = wafer_medians(s, diag);
    if (st == SL_OK)
        st = dielectric_mads(s, diag);
    if (st == SL_OK)
        st = flags_pass(s, diag);
    if (st == SL_OK)
        st = sl__analyze_wafer_statistics(&s->owner->pub, s->layout, s->wafer);
    return st;
}

sl_status sl_analyze_lot_stream(sl_analysis_stream **out, sl_store *store, const char *lot,
                                sl_diag *diag)
{
    return sl_analyze_lot_stream_view(out, store, lot, NULL, diag);
}

/* Net density n - p (cm^-2) at gate_V for a neutrality point at cnp_V. */
static double net_density_at(const sl_analysis *a, size_t split, double gate_V, double cnp_V)
{
    double vf = a->plan->fermi_velocity_m_s, mu = 0.0;
    if (sl_physics_solve_fermi_J(&mu, gate_V, cnp_V, a->split_capacitance_F_per_m2[split],
                                 a->temperature_K, vf) != SL_OK)
        return NAN;
    return sl_physics_net_density_per_m2(mu, a->temperature_K, vf) * SL_PER_CM2_PER_PER_M2;
}

/* Each split's window at the ends of its gate range from its measured mean
 * V_cnp (the wafer means'), and the share of its devices inside the sweep. */
static void windows_reached(sl_analysis *a)
{
    for (size_t k = 0; k < a->n_splits; k++) {
        sl_analyze_split *sp = &a->splits[k];
        double mean = sp->cnp.mean;
        sp->window_reached_per_cm2[0] = sp->window_reached_per_cm2[1] = NAN;
        if (isfinite(mean)) {
            sp->window_reached_per_cm2[0] = net_density_at(a, k, a->split_gate_max_V[k], mean);
            sp->window_reached_per_cm2[1] = -net_density_at(a, k, a->split_gate_min_V[k], mean);
        }
        size_t seen = sp->n_usable + sp->n_censored;
        sp->inside_share = seen ? (double)sp->n_usable / (double)seen : NAN;
    }
}

sl_status sl_analyze_lot_stream_view(sl_analysis_stream **out, sl_store *store, const char *lot,
                                     const sl_analyze_view *view, sl_diag *diag)
{
    *out = NULL;
    sl_analysis_stream *s = calloc(1, sizeof *s);
    if (!s || !(s->owner = calloc(1, sizeof *s->owner))) {
        free(s);
        return SL_ENOMEM;
    }
    s->store = store;
    sl_status st = load_lot(s, store, lot, view, diag);
    if (st == SL_OK)
        st = alloc_state(s);
    if (st == SL_OK)
        st = sl_store_scratch_open(&s->scratch, store, diag);
    if (st == SL_OK)
        st = run_passes(s, diag);
    if (st == SL_OK)
        windows_reached(&s->owner->pub);
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

const sl_store_device_row *sl__analysis_stream_row(const sl_analysis_stream *s)
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
    sl_status st = read(s->scratch, &wafer, &split, &r, diag);
    if (st == SL_OK && r) {
        evaluate(s, r, wafer);
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
    for (size_t w = 0; s->wafer_search && w < s->layout->n_wafers; w++)
        sl_stats_median_search_free(s->wafer_search[w]);
    for (size_t d = 0; s->dielectric && d < s->owner->pub.plan->n_dielectrics; d++)
        sl_stats_median_search_free(s->dielectric[d].search);
    free(s->wafer_search);
    for (size_t i = 0; s->params && i < s->layout->n_splits * SL_ANALYZE_N_PARAMS; i++)
        sl_stats_median_search_free(s->params[i].search);
    free(s->params);
    free(s->dielectric);
    free(s->wafer);
    free(s->censored.slot);
}

sl_analysis_owner *sl__analysis_stream_release(sl_analysis_stream *s)
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
        sl_analysis_free(&sl__analysis_stream_release(s)->pub);
}
