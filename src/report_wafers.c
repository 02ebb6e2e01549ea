/* SPDX-License-Identifier: MIT
 * Wafer maps of the lot report: one small map per wafer on the plan's die
 * grid with the prober's die coordinates (from wafer_map.first_die), dies
 * coloured by deviation from prediction (V; a die of several devices: their
 * median, with the count in its tooltip) on one symmetric range for the
 * whole lot, unusable and flagged dies marked, and one legend above all
 * maps. The dies come gathered by src/report_collect.c.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "report_internal.h"

#define MAP_GRID_PX 150.0   /* target grid edge of one small map */
#define MAP_MIN_CELL_PX 4.0
#define MAP_MAX_CELL_PX 16.0

/* Outlined as flagged: a die of one device when it is flagged, a die of
 * several when half of them or more are, so that a few flagged devices
 * among many per die do not outline every die. */
static int die_flagged(const report_die *die)
{
    return die->n_flagged > 0 && 2 * die->n_flagged >= die->n_devices;
}

#define DIE_LABEL_BYTES 64

/* The dies of wafer w as the chart takes them, into dies (n_slots room);
 * a die of several devices says how many in labels (n_slots room). */
static size_t wafer_dies(const report_data *d, const sl_plan *plan, size_t w, sl_chart_die *dies,
                         char (*labels)[DIE_LABEL_BYTES], size_t *n_shared)
{
    size_t n = 0;
    for (size_t k = 0; k < d->n_slots; k++) {
        const report_die *die = &d->dies[w * d->n_slots + k];
        if (die->n_devices == 0)
            continue;
        sl_chart_die *out = &dies[n++];
        *out = (sl_chart_die){ (int)(k % (size_t)plan->wafer_cols),
                               (int)(k / (size_t)plan->wafer_cols), SL_CHART_DIE_UNUSABLE, 0.0,
                               die_flagged(die), die->device };
        if (die->n_values > 0) {
            out->state = SL_CHART_DIE_VALUE;
            out->value = sl__report_die_value(die);
        }
        if (die->n_devices > 1) {
            snprintf(labels[n - 1], DIE_LABEL_BYTES, "%s of %u usable of %u devices",
                     die->n_values > SL_REPORT_DIE_VALUES ? "mean" : "median", die->n_values,
                     die->n_devices);
            out->device = labels[n - 1];
            (*n_shared)++;
        }
    }
    return n;
}

static double cell_px(const sl_plan *plan)
{
    long edge = plan->wafer_rows > plan->wafer_cols ? plan->wafer_rows : plan->wafer_cols;
    return fmin(fmax(floor(MAP_GRID_PX / (double)edge), MAP_MIN_CELL_PX), MAP_MAX_CELL_PX);
}

typedef struct {
    sl_chart_die *dies;
    char (*labels)[DIE_LABEL_BYTES];
    size_t n_shared;     /* dies drawn with several devices */
} die_scratch;

static void wafer_map(report_ctx *c, size_t w, die_scratch *ds)
{
    const sl_analysis *a = c->a;
    sl_chart_die *dies = ds->dies;
    size_t n_dies = wafer_dies(&c->data, a->plan, w, dies, ds->labels, &ds->n_shared);
    sl_chart_wafer_map map = { a->plan->wafers[w], (int)a->plan->wafer_rows,
                               (int)a->plan->wafer_cols, cell_px(a->plan),
                               c->data.colour_max_abs_V, "deviation from prediction (V)", "V", 0,
                               1, 1, (int)a->plan->first_die_x, (int)a->plan->first_die_y };
    sl_chart_buf_append(c->buf, "<figure class=\"wafer\">");
    if (sl_chart_wafer_map_svg(c->buf, &map, dies, n_dies) != SL_OK && c->buf->status == SL_OK)
        sl__report_note(c->buf, "this wafer's map could not be drawn");
    sl_chart_buf_append(c->buf, "<figcaption>split ");
    sl_chart_buf_escape(c->buf, a->plan->splits[c->data.wafer_split[w]].name);
    sl_chart_buf_append(c->buf, "</figcaption></figure>\n");
    c->sum->n_wafer_maps++;
    c->sum->n_dies += n_dies;
}

static int wafer_in_dielectric(const report_ctx *c, size_t w, size_t k)
{
    long s = c->data.wafer_split[w];
    return s >= 0 && c->a->plan->splits[s].dielectric == k;
}

static void dielectric_maps(report_ctx *c, size_t k, die_scratch *dies)
{
    const sl_analysis *a = c->a;
    size_t n_wafers = 0;
    for (size_t w = 0; w < a->plan->n_wafers; w++)
        n_wafers += wafer_in_dielectric(c, w, k);
    if (n_wafers == 0)
        return;
    sl_chart_buf_append(c->buf, "<div class=\"stack\"><h3>");
    sl_chart_buf_escape(c->buf, a->plan->dielectrics[k].name);
    sl_chart_buf_printf(c->buf, "</h3>\n<p class=\"small\">%zu wafers.</p>\n<div class=\"maps\">\n",
                        n_wafers);
    /* Split by split, so neighbouring maps share their treatment. */
    for (size_t s = 0; s < a->n_splits; s++)
        for (size_t w = 0; w < a->plan->n_wafers; w++)
            if (a->plan->splits[s].dielectric == k && c->data.wafer_split[w] == (long)s)
                wafer_map(c, w, dies);
    sl_chart_buf_append(c->buf, "</div></div>\n");
}

/* One legend and one colour scale for every map of the lot. */
static void maps_legend(report_ctx *c)
{
    double m = c->data.colour_max_abs_V;
    sl_chart_buf_printf(c->buf, "<figure class=\"wafer-legend\" data-colour-max=\"%g\">", m);
    sl_chart_wafer_legend_svg(c->buf, m, "deviation from prediction (V)");
    sl_chart_buf_printf(c->buf, "<figcaption>One colour scale for every map of the lot: "
                        "&minus;%g V to +%g V (99th percentile of the dies' |mean deviation|, "
                        "rounded up); larger deviations take the end colours.</figcaption>"
                        "</figure>\n", m, m);
}

sl_status sl__report_section_wafers(report_ctx *c)
{
    size_t slots = c->data.n_slots ? c->data.n_slots : 1;
    die_scratch ds = { malloc(slots * sizeof *ds.dies), malloc(slots * sizeof *ds.labels), 0 };
    if (!ds.dies || !ds.labels) {
        free(ds.dies);
        free(ds.labels);
        return SL_ENOMEM;
    }
    c->sum->n_dies_off_grid = c->data.n_off_grid;
    sl__report_section_open(c->buf, "wafers", "Wafer maps");
    sl_chart_buf_printf(c->buf,
                        "<p>Each die on the plan's %ld &times; %ld grid, coloured by the "
                        "deviation of its device's measured neutrality voltage from its "
                        "split's prediction (V; blue below, orange above). Die coordinates as "
                        "the prober counts them, from (%ld, %ld), along the top (column) and "
                        "the left (row). Grey with a cross: no usable "
                        "device; bare wafer: no device at that die. Heavy outline: a flagged "
                        "device (on a die of several devices: half of them or more flagged). "
                        "Notch at the bottom.</p>\n",
                        c->a->plan->wafer_rows, c->a->plan->wafer_cols, c->a->plan->first_die_x,
                        c->a->plan->first_die_y);
    if (c->a->plan->devices_per_die > 1)
        sl_chart_buf_printf(c->buf, "<p id=\"wafer-dies-shared\">%ld devices per die "
                            "(<code>wafer_map.devices_per_die</code>): a die shows the median "
                            "deviation of its usable devices, not each device; its tooltip says "
                            "how many devices it has.</p>\n", c->a->plan->devices_per_die);
    maps_legend(c);
    for (size_t k = 0; k < c->a->plan->n_dielectrics; k++)
        dielectric_maps(c, k, &ds);
    if (ds.n_shared > 0 && c->a->plan->devices_per_die == 1) /* known once drawn */
        sl_chart_buf_printf(c->buf, "<p class=\"note\" id=\"wafer-dies-shared\">%zu dies hold "
                            "several devices though the plan has one per die: each shows the "
                            "median deviation of its usable devices, its tooltip how many "
                            "devices it has.</p>\n", ds.n_shared);
    if (c->sum->n_dies_off_grid > 0) {
        char text[160];
        snprintf(text, sizeof text, "%zu devices have a die position outside the %ld x %ld grid "
                 "and are not drawn.", c->sum->n_dies_off_grid, c->a->plan->wafer_rows,
                 c->a->plan->wafer_cols);
        sl__report_note(c->buf, text);
    }
    sl__report_section_close(c->buf);
    free(ds.dies);
    free(ds.labels);
    return c->buf->status;
}
