/* SPDX-License-Identifier: MIT
 * Wafer maps of the lot report: one small map per wafer on the plan's die
 * grid, dies coloured by deviation from prediction (V) on a symmetric range
 * shared by the wafers of one dielectric, unusable and flagged dies marked.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "report_internal.h"

#define MAP_GRID_PX 130.0   /* target grid edge of one small map */
#define MAP_MIN_CELL_PX 5.0
#define MAP_MAX_CELL_PX 16.0
#define COLOUR_PERCENTILE 0.99

/* Devices grouped by wafer (plan order): wafer w owns order[first[w] ..
 * first[w + 1] - 1]. Dies and the grid slots are scratch for one wafer. */
typedef struct {
    size_t *order, *first;
    sl_chart_die *dies;
    double *sum_V;
    size_t *n_values;
    long *slot;          /* rows x cols: index into dies, or -1 */
    size_t n_slots;
} wafer_groups;

static void groups_free(wafer_groups *g)
{
    free(g->order);
    free(g->first);
    free(g->dies);
    free(g->sum_V);
    free(g->n_values);
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
    g->sum_V = malloc(n * sizeof *g->sum_V);
    g->n_values = malloc(n * sizeof *g->n_values);
    g->slot = malloc((g->n_slots ? g->n_slots : 1) * sizeof *g->slot);
    if (!g->order || !g->first || !g->dies || !g->sum_V || !g->n_values || !g->slot) {
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

static void add_device(wafer_groups *g, size_t *n_dies, const sl_analysis *a,
                       const sl_analyze_device *d)
{
    long slot = d->die_y * a->plan->wafer_cols + d->die_x;
    if (g->slot[slot] < 0) {
        sl_chart_die *die = &g->dies[*n_dies];
        *die = (sl_chart_die){ (int)d->die_x, (int)d->die_y, SL_CHART_DIE_UNUSABLE, 0.0, 0,
                               d->device };
        g->sum_V[*n_dies] = 0.0;
        g->n_values[*n_dies] = 0;
        g->slot[slot] = (long)(*n_dies)++;
    }
    size_t k = (size_t)g->slot[slot];
    g->dies[k].flagged |= d->flags != 0;
    if (isfinite(d->deviation_V)) {
        g->sum_V[k] += d->deviation_V;
        g->n_values[k]++;
    }
}

/* Dies of one wafer: devices sharing a die are averaged; a die is usable
 * when one of its devices is, flagged when one of them is. */
static size_t wafer_dies(wafer_groups *g, const sl_analysis *a, size_t w, size_t *off_grid)
{
    size_t n_dies = 0;
    for (size_t k = g->first[w]; k < g->first[w + 1]; k++) {
        const sl_analyze_device *d = &a->devices[g->order[k]];
        if (d->die_x < 0 || d->die_y < 0 || d->die_x >= a->plan->wafer_cols
            || d->die_y >= a->plan->wafer_rows) {
            (*off_grid)++;
            continue;
        }
        add_device(g, &n_dies, a, d);
    }
    for (size_t i = 0; i < n_dies; i++) {
        g->slot[g->dies[i].die_y * a->plan->wafer_cols + g->dies[i].die_x] = -1;
        if (g->n_values[i] > 0) {
            g->dies[i].state = SL_CHART_DIE_VALUE;
            g->dies[i].value = g->sum_V[i] / (double)g->n_values[i];
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
    sl_chart_buf_printf(c->buf,
                        "<p>Each die on the plan's %ld &times; %ld grid, coloured by the "
                        "deviation of its measured neutrality voltage from its split's "
                        "prediction (V; blue below, orange above). Grey with a cross: no usable "
                        "device. Heavy outline: flagged device. Notch at the bottom.</p>\n",
                        c->a->plan->wafer_rows, c->a->plan->wafer_cols);
    for (size_t k = 0; k < c->a->plan->n_dielectrics; k++)
        dielectric_maps(c, &g, k, scratch);
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
