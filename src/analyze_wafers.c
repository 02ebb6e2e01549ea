/* SPDX-License-Identifier: MIT
 * The wafer as the unit (see sl__analyze_wafer_statistics in
 * src/analyze_internal.h): from what the passes over a lot keep per wafer,
 * each wafer's mean (censored-normal maximum likelihood where devices lie
 * beyond the sweep), split summaries from the wafer means, the one-way
 * ANOVA on wafer means and the input of the effects fit. Holds state per
 * wafer and per split only; reads nothing.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"
#include "splitlot/units.h"

void sl__analyze_wafer_add(sl_analyze_wafer *w, double cnp_V)
{
    w->n++;
    double delta = cnp_V - w->mean_V;
    w->mean_V += delta / (double)w->n;
    w->m2_V2 += delta * (cnp_V - w->mean_V);
}

void sl__analyze_wafer_censor(sl_analyze_wafer *w, int above, double bound_V)
{
    /* V > b_i >= min b: the smallest bound is a true (if weaker) statement
     * for every device above, and so the largest for those below */
    if (above) {
        w->above_V = w->n_above++ ? fmin(w->above_V, bound_V) : bound_V;
    } else {
        w->below_V = w->n_below++ ? fmax(w->below_V, bound_V) : bound_V;
    }
}

int sl__analyze_wafer_censor_scored(sl_analyze_wafer *w, const sl_stats_robust *robust, int above,
                                   double bound_V)
{
    /* V > bound (or V < bound) with the bound itself beyond the limit: the
     * device's modified z is beyond it too (Iglewicz and Hoaglin 1993) */
    double m = robust ? sl_stats_modified_z_of(robust, bound_V - w->median_V) : 0.0;
    if (above ? m > SL_STATS_MODIFIED_Z_THRESHOLD : m < -SL_STATS_MODIFIED_Z_THRESHOLD) {
        w->n_censored_outliers++;
        return 1;
    }
    sl__analyze_wafer_censor(w, above, bound_V);
    return 0;
}

/* Doping per cm^2 of a V_cnp in a split, with its planned C_g: -C_g V / e. */
static double per_cm2_per_V(const sl_analysis *a, long split)
{
    return -a->split_capacitance_F_per_m2[split] / SL_SI_ELEMENTARY_CHARGE * SL_PER_CM2_PER_PER_M2;
}

/* Working arrays of the wafer-level pass. */
typedef struct {
    double *sd_V;          /* per dielectric: pooled within-wafer SD */
    double *mean_V;        /* per wafer, NaN: no mean */
    double *var_V2;        /* per wafer: sampling variance of the mean */
    double *mean_per_cm2, *var_per_cm4;
    double *scratch;       /* one split's wafer means */
    size_t *sizes;         /* wafers per split, for the ANOVA */
    double *grouped;       /* wafer-mean dopings grouped by split */
} wafer_work;

static void work_free(wafer_work *k)
{
    free(k->sd_V);
    free(k->mean_V);
    free(k->var_V2);
    free(k->mean_per_cm2);
    free(k->var_per_cm4);
    free(k->scratch);
    free(k->sizes);
    free(k->grouped);
}

static sl_status work_alloc(wafer_work *k, size_t n_dielectrics, size_t nw, size_t ns)
{
    k->sd_V = calloc(n_dielectrics + 1, sizeof *k->sd_V);
    k->mean_V = calloc(nw + 1, sizeof *k->mean_V);
    k->var_V2 = calloc(nw + 1, sizeof *k->var_V2);
    k->mean_per_cm2 = calloc(nw + 1, sizeof *k->mean_per_cm2);
    k->var_per_cm4 = calloc(nw + 1, sizeof *k->var_per_cm4);
    k->scratch = calloc(nw + 1, sizeof *k->scratch);
    k->sizes = calloc(ns + 1, sizeof *k->sizes);
    k->grouped = calloc(nw + 1, sizeof *k->grouped);
    return k->sd_V && k->mean_V && k->var_V2 && k->mean_per_cm2 && k->var_per_cm4 &&
                   k->scratch && k->sizes && k->grouped
               ? SL_OK
               : SL_ENOMEM;
}

/* Pooled within-wafer SD of V_cnp per dielectric (sum of squares over
 * sum of n - 1), and over the lot into a->device_sigma_V. */
static void pooled_device_sd(sl_analysis *a, const sl_layout *layout, const sl_analyze_wafer *wf,
                             double *sd_V)
{
    const sl_plan *plan = a->plan;
    double lot_ss = 0.0, lot_df = 0.0;
    for (size_t d = 0; d < plan->n_dielectrics; d++) {
        double ss = 0.0, df = 0.0;
        for (size_t w = 0; w < layout->n_wafers; w++)
            if (wf[w].split >= 0 && plan->splits[wf[w].split].dielectric == d && wf[w].n > 1) {
                ss += wf[w].m2_V2;
                df += (double)(wf[w].n - 1);
            }
        sd_V[d] = df > 0.0 ? sqrt(ss / df) : NAN;
        lot_ss += ss;
        lot_df += df;
    }
    a->device_sigma_V = lot_df > 0.0 ? sqrt(lot_ss / lot_df) : NAN;
}

/* One wafer's mean and its sampling variance; NaN without a usable device
 * inside the sweep. Censored devices enter by maximum likelihood with the
 * dielectric's pooled device SD (the lot's when it has none); without any
 * SD the plain mean of the devices inside the sweep stands, biased. */
static int wafer_mean(double *mean_V, double *var_V2, const sl_analyze_wafer *w, double sd_V)
{
    *mean_V = *var_V2 = NAN;
    if (w->n == 0)
        return 1;
    *mean_V = w->mean_V;
    *var_V2 = isfinite(sd_V) ? sd_V * sd_V / (double)w->n : 0.0;
    if (!w->n_above && !w->n_below)
        return 1;
    double m, se;
    if (isfinite(sd_V) && sd_V > 0.0 &&
        sl_stats_censored_mean(&m, &se, w->n, w->mean_V, sd_V, w->n_above, w->above_V,
                               w->n_below, w->below_V) == SL_OK && isfinite(se)) {
        *mean_V = m;
        *var_V2 = se * se;
        return 1;
    }
    return 0; /* the plain mean of the devices inside the sweep: biased */
}

static void wafer_means(sl_analysis *a, const sl_layout *layout, const sl_analyze_wafer *wf,
                        wafer_work *k)
{
    for (size_t w = 0; w < layout->n_wafers; w++) {
        k->mean_V[w] = k->var_V2[w] = k->mean_per_cm2[w] = k->var_per_cm4[w] = NAN;
        long split = wf[w].split;
        if (split < 0)
            continue;
        double sd = k->sd_V[a->plan->splits[split].dielectric];
        if (!wafer_mean(&k->mean_V[w], &k->var_V2[w], &wf[w], isfinite(sd) ? sd : a->device_sigma_V))
            a->n_wafers_censored_biased++;
        double g = per_cm2_per_V(a, split);
        k->mean_per_cm2[w] = g * k->mean_V[w];
        k->var_per_cm4[w] = g * g * k->var_V2[w];
        size_t censored = wf[w].n_above + wf[w].n_below + wf[w].n_censored_outliers;
        a->splits[split].n_censored += censored;
        a->n_censored += censored;
    }
}

/* A split from its wafer means: mean of the means, their SD, the t
 * interval with wafers - 1 df (none with one wafer). */
static void summarize_split(sl_analysis *a, size_t s, const sl_layout *layout,
                            const sl_analyze_wafer *wf, wafer_work *k)
{
    sl_analyze_split *sp = &a->splits[s];
    size_t m = 0;
    for (size_t w = 0; w < layout->n_wafers; w++)
        if (wf[w].split == (long)s && isfinite(k->mean_V[w]))
            k->scratch[m++] = k->mean_V[w];
    sp->n_wafers = m;
    sp->cnp.n = m;
    sp->cnp.mean = sp->cnp.sd = sp->cnp.se = sp->cnp.ci_low = sp->cnp.ci_high = NAN;
    sp->bias_V = NAN;
    sp->prediction_in_ci = 0;
    size_t seen = sp->n_usable + sp->n_censored;
    if (seen > 0 && (double)sp->n_censored > SL_ANALYZE_CENSORED_WARN * (double)seen)
        a->n_splits_censored++;
    if (m == 0 || sl_stats_summarize(&sp->cnp, k->scratch, m, 0.95) != SL_OK)
        return;
    sp->bias_V = sp->cnp.mean - sp->cnp_predicted_V;
    sp->prediction_in_ci = m >= 2 && sp->cnp_predicted_V >= sp->cnp.ci_low &&
                           sp->cnp_predicted_V <= sp->cnp.ci_high;
    if (sp->cnp.mean < a->split_gate_min_V[s] || sp->cnp.mean > a->split_gate_max_V[s])
        a->n_splits_cnp_outside++;
}

/* One-way ANOVA of wafer-mean doping across splits. */
static void anova_wafers(sl_analysis *a, const sl_layout *layout, const sl_analyze_wafer *wf,
                         wafer_work *k)
{
    size_t n = 0;
    for (size_t s = 0; s < a->n_splits; s++) {
        k->sizes[s] = 0;
        for (size_t w = 0; w < layout->n_wafers; w++)
            if (wf[w].split == (long)s && isfinite(k->mean_per_cm2[w])) {
                k->grouped[n++] = k->mean_per_cm2[w];
                k->sizes[s]++;
            }
    }
    memset(&a->anova, 0, sizeof a->anova);
    if (sl_stats_anova_oneway(&a->anova, NULL, k->grouped, k->sizes, a->n_splits) != SL_OK)
        a->anova.f = a->anova.p = NAN;
}

sl_status sl__analyze_wafer_statistics(sl_analysis *a, const sl_layout *layout,
                                      const sl_analyze_wafer *wafers)
{
    wafer_work k = { 0 };
    sl_status st = work_alloc(&k, a->plan->n_dielectrics, layout->n_wafers, a->n_splits);
    if (st == SL_OK) {
        pooled_device_sd(a, layout, wafers, k.sd_V);
        wafer_means(a, layout, wafers, &k);
        for (size_t s = 0; s < a->n_splits; s++)
            summarize_split(a, s, layout, wafers, &k);
        anova_wafers(a, layout, wafers, &k);
        st = sl__analyze_effects(a, layout, k.mean_per_cm2, k.var_per_cm4);
    }
    work_free(&k);
    return st;
}
