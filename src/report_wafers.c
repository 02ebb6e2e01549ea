/* SPDX-License-Identifier: MIT
 * Wafer maps of the lot report: one small map per wafer on the plan's die
 * grid (prober coordinates counted from wafer_map.first_die), dies coloured
 * by deviation from prediction (V) on a symmetric range shared by the wafers
 * of one dielectric, unusable and flagged dies marked. A die with several
 * devices shows their median, its tooltip the count.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#include "report_internal.h"

#define MAP_GRID_PX 130.0   /* target grid edge of one small map */
#define MAP_MIN_CELL_PX 5.0
#define MAP_MAX_CELL_PX 16.0
#define COLOUR_PERCENTILE 0.99
#define DIE_LABEL_BYTES 96

/* Devices grouped by wafer (plan order): wafer w owns order[first[w] ..
 * first[w + 1] - 1]. Dies and the grid slots are scratch for one wafer. */
typedef struct {
    size_t *order, *first;
    sl_chart_die *dies;
    size_t *n_devices;   /* per die */
    char (*label)[DIE_LABEL_BYTES]; /* per die: the device, or the count */
    double *values_V;    /* one wafer's deviations, die by die */
    size_t *die_of;      /* per device of the wafer: its die */
    long *slot;          /* rows x cols: index into dies, or -1 */
    size_t n_slots;
    size_t n_shared;     /* dies drawn with more than one device, all wafers */
} wafer_groups;

static void groups_free(wafer_groups *g)
{
    free(g->order);
    free(g->first);
    free(g->dies);
    free(g->n_devices);
    free(g->label);
    free(g->values_V);
    free(g->die_of);
    free(g->slot);
}

static long wafer_of(const sl_analysis *a, size_t device)
{
    return sl_plan_wafer_index(a->plan, a->devices[device].wafer);
}

static sl_status groups_build(wafer_groups *g, const sl_analysis *a)
{
    size_t nw = a->plan->n_wafers, n = a->n_devices ? a->n_devices : 1;
    memset(g, 0, sizeof *g);
    g->n_slots = (size_t)a->plan->wafer_rows * (size_t)a->plan->wafer_cols;
    g->order = malloc(n * sizeof *g->order);
    g->first = calloc(nw + 2, sizeof *g->first);
    g->dies = malloc(n * sizeof *g->dies);
    g->n_devices = malloc(n * sizeof *g->n_devices);
    g->label = malloc(n * sizeof *g->label);
    g->values_V = malloc(n * sizeof *g->values_V);
    g->die_of = malloc(n * sizeof *g->die_of);
    g->slot = malloc((g->n_slots ? g->n_slots : 1) * sizeof *g->slot);
    if (!g->order || !g->first || !g->dies || !g->n_devices || !g->label || !g->values_V ||
        !g->die_of || !g->slot) {
        groups_free(g);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < a->n_devices; i++)
        if (wafer_of(a, i) >= 0)
            g->first[wafer_of(a, i) + 2]++;
    for (size_t w = 0; w < nw; w++)
        g->first[w + 2] += g->first[w + 1];
    for (size_t i = 0; i < a->n_devices; i++) {
        long w = wafer_of(a, i);
        if (w >= 0)
            g->order[g->first[w + 1]++] = i;
    }
    for (size_t s = 0; s < g->n_slots; s++)
        g->slot[s] = -1;
    return SL_OK;
}

static int by_value(const void *pa, const void *pb)
{
    double a = *(const double *)pa, b = *(const double *)pb;
    return (a > b) - (a < b);
}

/* Symmetric colour half-range for one dielectric: the 99th percentile of
 * |deviation| of its usable devices, rounded up to a 1-2-5 number, so one
 * wild device does not wash out every other colour. */
static double colour_range_V(const sl_analysis *a, size_t dielectric, double *scratch)
{
    size_t n = 0;
    for (size_t i = 0; i < a->n_devices; i++) {
        const sl_analyze_device *d = &a->devices[i];
        if (a->plan->splits[d->split].dielectric == dielectric && isfinite(d->deviation_V))
            scratch[n++] = fabs(d->deviation_V);
    }
    if (n == 0)
        return 1.0;
    qsort(scratch, n, sizeof *scratch, by_value);
    double m = scratch[(size_t)ceil(COLOUR_PERCENTILE * (double)n) - 1];
    if (!(m > 0.0))
        return 1.0;
    double step = sl_chart_nice_step(m, 4);
    return ceil(m / step - 1e-9) * step;
}

/* The die's slot on the grid from the prober's coordinates, or -1 when
 * they lie outside it. */
static long die_slot(const sl_plan *p, const sl_analyze_device *d, long *col, long *row)
{
    *col = d->die_x - p->first_die_x;
    *row = d->die_y - p->first_die_y;
    if (*col < 0 || *row < 0 || *col >= p->wafer_cols || *row >= p->wafer_rows)
        return -1;
    return *row * p->wafer_cols + *col;
}

static void add_device(wafer_groups *g, size_t *n_dies, size_t k_device, const sl_analysis *a,
                       const sl_analyze_device *d)
{
    long col, row, slot = die_slot(a->plan, d, &col, &row);
    if (g->slot[slot] < 0) {
        sl_chart_die *die = &g->dies[*n_dies];
        *die = (sl_chart_die){ (int)col, (int)row, SL_CHART_DIE_UNUSABLE, 0.0, 0, d->device };
        g->n_devices[*n_dies] = 0;
        g->slot[slot] = (long)(*n_dies)++;
    }
    size_t k = (size_t)g->slot[slot];
    g->dies[k].flagged |= d->flags != 0;
    g->n_devices[k]++;
    g->die_of[k_device] = k;
}

/* The usable deviations of die k (its devices' among the wafer's first n),
 * sorted, into out; their count. */
static size_t die_values(const wafer_groups *g, const sl_analysis *a, size_t w, size_t n,
                         size_t k, double *out)
{
    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        const sl_analyze_device *d = &a->devices[g->order[g->first[w] + i]];
        if (g->die_of[i] == k && isfinite(d->deviation_V))
            out[m++] = d->deviation_V;
    }
    gsl_sort(out, 1, m);
    return m;
}

/* Dies of one wafer: a die shows the median deviation of its usable
 * devices (one device: its own), is usable when one of them is and flagged
 * when one of them is; a die of several devices says how many. */
static size_t wafer_dies(wafer_groups *g, const sl_analysis *a, size_t w, size_t *off_grid)
{
    size_t n_dies = 0, n = g->first[w + 1] - g->first[w];
    for (size_t i = 0; i < n; i++) {
        const sl_analyze_device *d = &a->devices[g->order[g->first[w] + i]];
        long col, row;
        g->die_of[i] = (size_t)-1;
        if (die_slot(a->plan, d, &col, &row) < 0) {
            (*off_grid)++;
            continue;
        }
        add_device(g, &n_dies, i, a, d);
    }
    for (size_t k = 0; k < n_dies; k++) {
        sl_chart_die *die = &g->dies[k];
        g->slot[die->die_y * a->plan->wafer_cols + die->die_x] = -1;
        size_t m = die_values(g, a, w, n, k, g->values_V);
        if (m > 0) {
            die->state = SL_CHART_DIE_VALUE;
            die->value = gsl_stats_median_from_sorted_data(g->values_V, 1, m);
        }
        if (g->n_devices[k] > 1) {
            snprintf(g->label[k], DIE_LABEL_BYTES, "median of %zu usable of %zu devices", m,
                     g->n_devices[k]);
            die->device = g->label[k];
            g->n_shared++;
        }
    }
    return n_dies;
}

static double cell_px(const sl_plan *plan)
{
    long edge = plan->wafer_rows > plan->wafer_cols ? plan->wafer_rows : plan->wafer_cols;
    return fmin(fmax(floor(MAP_GRID_PX / (double)edge), MAP_MIN_CELL_PX), MAP_MAX_CELL_PX);
}

static void wafer_map(report_ctx *c, wafer_groups *g, size_t w, double max_abs_V)
{
    const sl_analysis *a = c->a;
    size_t n_dies = wafer_dies(g, a, w, &c->sum->n_dies_off_grid);
    const sl_analyze_device *first = &a->devices[g->order[g->first[w]]];
    sl_chart_wafer_map map = { a->plan->wafers[w], (int)a->plan->wafer_rows,
                               (int)a->plan->wafer_cols, cell_px(a->plan), max_abs_V,
                               "deviation from prediction (V)", "V", 0 };
    sl_chart_buf_append(c->buf, "<figure class=\"wafer\">");
    if (sl_chart_wafer_map_svg(c->buf, &map, g->dies, n_dies) != SL_OK && c->buf->status == SL_OK)
        sl_report_note(c->buf, "this wafer's map could not be drawn");
    sl_chart_buf_append(c->buf, "<figcaption>split ");
    sl_chart_buf_escape(c->buf, a->plan->splits[first->split].name);
    sl_chart_buf_append(c->buf, "</figcaption></figure>\n");
    c->sum->n_wafer_maps++;
    c->sum->n_dies += n_dies;
}

/* Split of a wafer with devices, else -1. */
static long wafer_split(const wafer_groups *g, const sl_analysis *a, size_t w)
{
    if (g->first[w] == g->first[w + 1])
        return -1;
    return a->devices[g->order[g->first[w]]].split;
}

static int wafer_in_dielectric(const wafer_groups *g, const sl_analysis *a, size_t w, size_t k)
{
    long s = wafer_split(g, a, w);
    return s >= 0 && a->plan->splits[s].dielectric == k;
}

static void dielectric_maps(report_ctx *c, wafer_groups *g, size_t k, double *scratch)
{
    const sl_analysis *a = c->a;
    size_t n_wafers = 0;
    for (size_t w = 0; w < a->plan->n_wafers; w++)
        n_wafers += wafer_in_dielectric(g, a, w, k);
    if (n_wafers == 0)
        return;
    double max_abs_V = colour_range_V(a, k, scratch);
    sl_chart_buf_append(c->buf, "<div class=\"stack\"><h3>");
    sl_chart_buf_escape(c->buf, a->plan->dielectrics[k].name);
    sl_chart_buf_printf(c->buf, "</h3>\n<p class=\"small\">%zu wafers; colours from &minus;%g V "
                        "to +%g V (99th percentile of |deviation| on this dielectric, rounded "
                        "up); larger deviations take the end colours.</p>\n<div class=\"maps\">\n",
                        n_wafers, max_abs_V, max_abs_V);
    /* Split by split, so neighbouring maps share their treatment. */
    for (size_t s = 0; s < a->n_splits; s++)
        for (size_t w = 0; w < a->plan->n_wafers; w++)
            if (a->plan->splits[s].dielectric == k && wafer_split(g, a, w) == (long)s)
                wafer_map(c, g, w, max_abs_V);
    sl_chart_buf_append(c->buf, "</div></div>\n");
}

sl_status sl_report_section_wafers(report_ctx *c)
{
    wafer_groups g;
    double *scratch = malloc((c->a->n_devices + 1) * sizeof *scratch);
    if (!scratch || groups_build(&g, c->a) != SL_OK) {
        free(scratch);
        return SL_ENOMEM;
    }
    sl_report_section_open(c->buf, "wafers", "Wafer maps");
    const sl_plan *p = c->a->plan;
    sl_chart_buf_printf(c->buf,
                        "<p>Each die on the plan's %ld &times; %ld grid (prober coordinates "
                        "from (%ld, %ld) at the top left), coloured by the "
                        "deviation of its measured neutrality voltage from its split's "
                        "prediction (V; blue below, orange above). Grey with a cross: no usable "
                        "device. Heavy outline: flagged device. Notch at the bottom.</p>\n",
                        p->wafer_rows, p->wafer_cols, p->first_die_x, p->first_die_y);
    if (p->devices_per_die > 1)
        sl_chart_buf_printf(c->buf, "<p id=\"wafer-dies-shared\">%ld devices per die "
                            "(<code>wafer_map.devices_per_die</code>): a die shows the median "
                            "deviation of its usable devices, not each device; its tooltip says "
                            "how many devices it has.</p>\n", p->devices_per_die);
    for (size_t k = 0; k < p->n_dielectrics; k++)
        dielectric_maps(c, &g, k, scratch);
    if (g.n_shared > 0 && p->devices_per_die == 1) /* known once the maps are drawn */
        sl_chart_buf_printf(c->buf, "<p class=\"note\" id=\"wafer-dies-shared\">%zu dies hold "
                            "several devices though the plan has one per die: each shows the "
                            "median deviation of its usable devices, its tooltip how many "
                            "devices it has.</p>\n", g.n_shared);
    if (c->sum->n_dies_off_grid > 0) {
        char text[160];
        snprintf(text, sizeof text, "%zu devices have a die position outside the %ld x %ld grid "
                 "and are not drawn.", c->sum->n_dies_off_grid, c->a->plan->wafer_rows,
                 c->a->plan->wafer_cols);
        sl_report_note(c->buf, text);
    }
    sl_report_section_close(c->buf);
    groups_free(&g);
    free(scratch);
    return c->buf->status;
}
