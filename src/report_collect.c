/* SPDX-License-Identifier: MIT
 * What the lot report needs of the devices, gathered in passes over them:
 * per split the strip's points or bins, per wafer and die the mean deviation
 * and flags, one colour range for every wafer map. Devices come from an
 * analysis in memory or, one at a time, from a streamed one, so that the
 * report's memory grows with splits, wafers and dies, not with devices.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#include "report_internal.h"

#define COLOUR_PERCENTILE 0.99

sl_status sl__report_next_device(report_ctx *c, const sl_analyze_device **device)
{
    if (c->stream)
        return sl_analysis_stream_next_device(c->stream, device, c->diag);
    if (c->next_device >= c->a->n_devices) {
        c->next_device = 0;
        *device = NULL;
        return SL_OK;
    }
    *device = &c->a->devices[c->next_device++];
    return SL_OK;
}

sl_status sl__report_next_flagged(report_ctx *c, const sl_analyze_device **device)
{
    if (c->stream)
        return sl_analysis_stream_next_flagged(c->stream, device, c->diag);
    if (c->next_flagged >= c->a->n_flagged) {
        c->next_flagged = 0;
        *device = NULL;
        return SL_OK;
    }
    *device = &c->a->devices[c->a->flagged[c->next_flagged++]];
    return SL_OK;
}

void sl__report_rewind(report_ctx *c)
{
    if (c->stream)
        sl_analysis_stream_rewind(c->stream);
    c->next_device = c->next_flagged = 0;
}

static void strips_free(report_strip *strips)
{
    if (strips)
        for (size_t s = 0; strips[s].cap_points != (size_t)-1; s++) {
            free(strips[s].values_V);
            free(strips[s].flagged);
            free(strips[s].labels);
            free(strips[s].label_ptrs);
        }
    free(strips);
}

void sl__report_data_free(report_data *data)
{
    strips_free(data->strips);
    for (int q = 0; q < REPORT_QUANTITIES; q++)
        strips_free(data->quantity[q]);
    free(data->dies);
    free(data->wafer_split);
    memset(data, 0, sizeof *data);
}

/* Room for a split's points: every usable device, or the outliers drawn
 * over its bins; labels only with_labels. The array ends with a cap of
 * (size_t)-1. */
static report_strip *strips_new(const sl_analysis *a, int with_labels)
{
    report_strip *strips = calloc(a->n_splits + 1, sizeof *strips);
    if (!strips)
        return NULL;
    strips[a->n_splits].cap_points = (size_t)-1;
    for (size_t s = 0; s < a->n_splits; s++) {
        report_strip *st = &strips[s];
        size_t usable = a->splits[s].n_usable;
        st->binned = usable > SL_REPORT_STRIP_POINTS_MAX;
        st->cap_points = st->binned ? SL_REPORT_STRIP_OUTLIERS_MAX : usable;
        size_t n = st->cap_points ? st->cap_points : 1;
        st->values_V = malloc(n * sizeof *st->values_V);
        st->flagged = malloc(n);
        st->labels = with_labels ? malloc(n * sizeof *st->labels) : NULL;
        st->label_ptrs = with_labels ? malloc(n * sizeof *st->label_ptrs) : NULL;
        if (!st->values_V || !st->flagged || (with_labels && (!st->labels || !st->label_ptrs))) {
            strips_free(strips);
            return NULL;
        }
    }
    return strips;
}

static sl_status strips_alloc(report_data *d, const sl_analysis *a)
{
    d->strips = strips_new(a, 1);
    for (int q = 0; d->strips && q < REPORT_QUANTITIES; q++)
        if (!(d->quantity[q] = strips_new(a, 1)))
            return SL_ENOMEM;
    return d->strips ? SL_OK : SL_ENOMEM;
}

static sl_status dies_alloc(report_data *d, const sl_plan *plan)
{
    d->n_slots = (size_t)plan->wafer_rows * (size_t)plan->wafer_cols;
    size_t n = plan->n_wafers * d->n_slots;
    d->dies = calloc(n ? n : 1, sizeof *d->dies);
    d->wafer_split = malloc((plan->n_wafers ? plan->n_wafers : 1) * sizeof *d->wafer_split);
    if (!d->dies || !d->wafer_split)
        return SL_ENOMEM;
    for (size_t w = 0; w < plan->n_wafers; w++)
        d->wafer_split[w] = -1;
    return SL_OK;
}

/* A device parameter in its own unit, as its tooltip shows it (the chart
 * draws mobility and n0 on a log scale). */
static void quantity_text(char *out, size_t size, const sl_analyze_device *d, report_quantity q)
{
    switch (q) {
    case REPORT_MOBILITY: snprintf(out, size, "%.4g cm\xc2\xb2/V s", d->mobility_cm2_per_Vs); break;
    case REPORT_N0: snprintf(out, size, "%.3g cm\xe2\x81\xbb\xc2\xb2", d->n0_per_cm2); break;
    case REPORT_HYSTERESIS: snprintf(out, size, "%.3g V", d->hysteresis_V); break;
    default: snprintf(out, size, "-"); break;
    }
}

/* value (as charted) of a device; q a parameter, or -1 for V_cnp, whose
 * label is the device alone (the chart adds the value in volts). */
static void add_value(report_strip *st, const sl_analyze_device *dev, double value, int q)
{
    if (st->n_points >= st->cap_points) {
        st->n_flagged_not_drawn += st->binned;
        return;
    }
    size_t k = st->n_points++;
    st->values_V[k] = value;
    st->flagged[k] = dev->flags != 0;
    if (st->labels) {
        int n = snprintf(st->labels[k], SL_REPORT_LABEL_BYTES, "%s %s", dev->wafer, dev->device);
        if (q >= 0 && n >= 0 && (size_t)n + 2 < SL_REPORT_LABEL_BYTES) {
            memcpy(st->labels[k] + n, ": ", 3);
            quantity_text(st->labels[k] + n + 2, SL_REPORT_LABEL_BYTES - (size_t)n - 2, dev,
                          (report_quantity)q);
        }
        st->label_ptrs[k] = st->labels[k];
    }
}

static void add_point(report_strip *st, const sl_analyze_device *dev)
{
    add_value(st, dev, dev->cnp_measured_V, -1);
}

/* A device parameter as charted: logarithms of mobility and n0 (their
 * spread is multiplicative), hysteresis in volts; NaN when not measured. */
double sl__report_quantity_value(const sl_analyze_device *d, report_quantity q)
{
    switch (q) {
    case REPORT_MOBILITY: return d->mobility_cm2_per_Vs > 0.0 ? log10(d->mobility_cm2_per_Vs) : NAN;
    case REPORT_N0: return d->n0_per_cm2 > 0.0 ? log10(d->n0_per_cm2) : NAN;
    case REPORT_HYSTERESIS: return isfinite(d->hysteresis_V) ? d->hysteresis_V : NAN;
    default: return NAN;
    }
}

/* The plan index of a device's wafer; devices come wafer by wafer, so the
 * last answer is tried first. */
static long wafer_index(const sl_plan *plan, const char *wafer, long *last)
{
    if (*last >= 0 && strcmp(plan->wafers[*last], wafer) == 0)
        return *last;
    *last = sl_plan_wafer_index(plan, wafer);
    return *last;
}

static void add_die(report_data *d, const sl_plan *plan, long w, const sl_analyze_device *dev)
{
    if (w < 0)
        return;
    /* the prober's coordinates, counted from wafer_map.first_die */
    long col = dev->die_x - plan->first_die_x, row = dev->die_y - plan->first_die_y;
    if (col < 0 || row < 0 || col >= plan->wafer_cols || row >= plan->wafer_rows) {
        d->n_off_grid++;
        return;
    }
    if (d->wafer_split[w] < 0)
        d->wafer_split[w] = dev->split;
    report_die *die = &d->dies[(size_t)w * d->n_slots + (size_t)(row * plan->wafer_cols + col)];
    if (die->n_devices++ == 0)
        snprintf(die->device, sizeof die->device, "%s", dev->device);
    die->n_flagged += dev->flags != 0;
    if (isfinite(dev->deviation_V)) {
        if (die->n_values < SL_REPORT_DIE_VALUES)
            die->values_V[die->n_values] = dev->deviation_V;
        die->sum_V += dev->deviation_V;
        die->n_values++;
    }
}

static size_t bin_of(const report_strip *s, double v)
{
    double width = s->max_V - s->min_V;
    if (!(width > 0.0))
        return 0;
    double f = (v - s->min_V) / width * SL_REPORT_STRIP_BINS;
    size_t k = f <= 0.0 ? 0 : (size_t)f;
    return k >= SL_REPORT_STRIP_BINS ? SL_REPORT_STRIP_BINS - 1 : k;
}

/* A density strip's bins span what a device not flagged can take, known
 * before the devices are read: inside the flag interval (it would be
 * flagged off-prediction outside), narrowed to the split's mean +/- 6
 * robust spreads (where the outlier rule, median +/- 3.5 spreads, keeps
 * them); the rare device beyond that counts in an end bin. */
static void bin_range(report_strip *st, const sl_analyze_split *sp)
{
    double lo = sp->flag_low_V, hi = sp->flag_high_V;
    if (isfinite(sp->cnp.mean) && isfinite(sp->spread_V) && sp->spread_V > 0.0) {
        lo = isfinite(lo) ? fmax(lo, sp->cnp.mean - 6.0 * sp->spread_V) : sp->cnp.mean - 6.0 * sp->spread_V;
        hi = isfinite(hi) ? fmin(hi, sp->cnp.mean + 6.0 * sp->spread_V) : sp->cnp.mean + 6.0 * sp->spread_V;
    }
    st->min_V = isfinite(lo) ? lo : sp->cnp.mean;
    st->max_V = isfinite(hi) && hi > st->min_V ? hi : st->min_V;
}

/* The bins of a parameter's density strip cover what devices plausibly
 * take, fixed before the pass: 10 to 1e6 cm^2/Vs, 1e9 to 3e13 cm^-2, and
 * a quarter of the split's gate range either way for hysteresis; values
 * beyond count in an end bin. */
static void quantity_bin_range(report_strip *st, const sl_analysis *a, size_t split,
                               report_quantity q)
{
    double quarter = 0.25 * (a->split_gate_max_V[split] - a->split_gate_min_V[split]);
    st->min_V = q == REPORT_MOBILITY ? 1.0 : q == REPORT_N0 ? 9.0 : -quarter;
    st->max_V = q == REPORT_MOBILITY ? 6.0 : q == REPORT_N0 ? 13.5 : quarter;
    if (!(st->max_V > st->min_V))
        st->max_V = st->min_V + 1.0;
}

static size_t bin_of(const report_strip *s, double v);

/* A device's parameters into their strips, as its V_cnp into its own. */
static void add_quantities(report_data *d, const sl_analyze_device *dev)
{
    for (int q = 0; q < REPORT_QUANTITIES; q++) {
        double v = sl__report_quantity_value(dev, (report_quantity)q);
        if (!isfinite(v))
            continue;
        d->n_quantity_values[q]++;
        report_strip *s = &d->quantity[q][dev->split];
        if (!s->binned || dev->flags)
            add_value(s, dev, v, q);
        else
            s->bins[bin_of(s, v)]++;
    }
}

/* One pass: every usable device of a small split as a point; in a large
 * one the flagged devices as points (the first SL_REPORT_STRIP_OUTLIERS_MAX
 * met) and the others binned; every device on its die. */
static sl_status collect_pass(report_ctx *c)
{
    report_data *d = &c->data;
    const sl_plan *plan = c->a->plan;
    long last_wafer = -1;
    const sl_analyze_device *dev;
    sl_status st;
    while ((st = sl__report_next_device(c, &dev)) == SL_OK && dev) {
        add_die(d, plan, wafer_index(plan, dev->wafer, &last_wafer), dev);
        if (dev->split < 0 || (size_t)dev->split >= c->a->n_splits ||
            !isfinite(dev->cnp_measured_V))
            continue;
        add_quantities(d, dev);
        report_strip *s = &d->strips[dev->split];
        if (!s->binned || dev->flags)
            add_point(s, dev);
        else
            s->bins[bin_of(s, dev->cnp_measured_V)]++;
    }
    return st;
}

double sl__report_die_value(const report_die *die)
{
    if (die->n_values == 0)
        return NAN;
    if (die->n_values > SL_REPORT_DIE_VALUES)
        return die->sum_V / (double)die->n_values;
    double v[SL_REPORT_DIE_VALUES];
    memcpy(v, die->values_V, die->n_values * sizeof *v);
    gsl_sort(v, 1, die->n_values);
    return gsl_stats_median_from_sorted_data(v, 1, die->n_values);
}

static int by_value(const void *pa, const void *pb)
{
    double a = *(const double *)pa, b = *(const double *)pb;
    return (a > b) - (a < b);
}

/* One symmetric colour half-range for every wafer map of the lot: the 99th
 * percentile of |deviation| of its dies (sl__report_die_value), rounded up to a 1-2-5
 * number, so one wild die does not wash out every other colour. */
static sl_status colour_range(report_data *d, const sl_plan *plan)
{
    size_t n_all = plan->n_wafers * d->n_slots, n = 0;
    double *v = malloc((n_all ? n_all : 1) * sizeof *v);
    if (!v)
        return SL_ENOMEM;
    for (size_t i = 0; i < n_all; i++)
        if (d->dies[i].n_values > 0)
            v[n++] = fabs(sl__report_die_value(&d->dies[i]));
    d->colour_max_abs_V = 1.0;
    if (n > 0) {
        qsort(v, n, sizeof *v, by_value);
        double m = v[(size_t)ceil(COLOUR_PERCENTILE * (double)n) - 1];
        if (m > 0.0) {
            double step = sl_chart_nice_step(m, 4);
            d->colour_max_abs_V = ceil(m / step - 1e-9) * step;
        }
    }
    free(v);
    return SL_OK;
}

sl_status sl__report_collect(report_ctx *c)
{
    report_data *d = &c->data;
    sl_status st = strips_alloc(d, c->a);
    if (st == SL_OK)
        st = dies_alloc(d, c->a->plan);
    for (size_t s = 0; st == SL_OK && s < c->a->n_splits; s++)
        if (d->strips[s].binned) {
            bin_range(&d->strips[s], &c->a->splits[s]);
            for (int q = 0; q < REPORT_QUANTITIES; q++)
                quantity_bin_range(&d->quantity[q][s], c->a, s, (report_quantity)q);
        }
    if (st == SL_OK)
        st = collect_pass(c);
    if (st == SL_OK)
        st = colour_range(d, c->a->plan);
    return st;
}
