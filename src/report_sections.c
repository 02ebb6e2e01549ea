/* SPDX-License-Identifier: MIT
 * Chart sections of the lot report: measured neutrality voltages per split
 * against the predicted bands (one strip chart per dielectric, as stacks
 * differ in voltage scale by an order of magnitude), and the level effects
 * planned versus estimated. Wafer maps and curves have their own files.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "report_internal.h"

#define STRIP_PLOT_HEIGHT_PX 260.0
#define STRIP_MIN_BAND_PX 110.0
#define STRIP_MIN_WIDTH_PX 420.0
#define STRIP_MAX_WIDTH_PX 1000.0
#define STRIP_LEGEND_PX 130.0 /* the strip the chart takes from the plot for its legend */
#define LABEL_CHAR_PX 6.0    /* the chart module's estimate of a label character */
#define LABEL_SLANT_SIN 0.5  /* slanted category labels run at 30 degrees */
#define LABEL_SLANT_COS 0.866
#define DEVICE_LABEL_BYTES 136 /* wafer and device names of at most 64 bytes each */

/* Every device's value, flag and label, grouped by split: split s owns the
 * entries first[s] .. first[s + 1] - 1. */
typedef struct {
    double *values_V;
    unsigned char *flagged;
    const char **labels;
    char (*label_text)[DEVICE_LABEL_BYTES];
    size_t *first;
} strip_data;

static void strip_data_free(strip_data *d)
{
    free(d->values_V);
    free(d->flagged);
    free(d->labels);
    free(d->label_text);
    free(d->first);
}

static sl_status strip_data_alloc(strip_data *d, size_t n_devices, size_t n_splits)
{
    size_t n = n_devices ? n_devices : 1;
    d->values_V = malloc(n * sizeof *d->values_V);
    d->flagged = malloc(n);
    d->labels = malloc(n * sizeof *d->labels);
    d->label_text = malloc(n * sizeof *d->label_text);
    d->first = calloc(n_splits + 2, sizeof *d->first);
    if (d->values_V && d->flagged && d->labels && d->label_text && d->first)
        return SL_OK;
    strip_data_free(d);
    return SL_ENOMEM;
}

/* Counting sort of the devices by split, keeping import order inside one. */
static sl_status strip_data_build(strip_data *d, const sl_analysis *a)
{
    if (strip_data_alloc(d, a->n_devices, a->n_splits) != SL_OK)
        return SL_ENOMEM;
    for (size_t i = 0; i < a->n_devices; i++)
        d->first[a->devices[i].split + 2]++;
    for (size_t s = 0; s < a->n_splits; s++)
        d->first[s + 2] += d->first[s + 1];
    for (size_t i = 0; i < a->n_devices; i++) {
        const sl_analyze_device *dev = &a->devices[i];
        size_t k = d->first[dev->split + 1]++;
        d->values_V[k] = dev->cnp_measured_V;
        d->flagged[k] = dev->flags != 0;
        snprintf(d->label_text[k], DEVICE_LABEL_BYTES, "%s %s", dev->wafer, dev->device);
        d->labels[k] = d->label_text[k];
    }
    return SL_OK;
}

static size_t flagged_markers(const strip_data *d, size_t split)
{
    size_t n = 0;
    for (size_t k = d->first[split]; k < d->first[split + 1]; k++)
        n += d->flagged[k] && isfinite(d->values_V[k]);
    return n;
}

static size_t fill_categories(sl_chart_category *cats, report_ctx *c, const strip_data *d,
                              size_t dielectric)
{
    size_t count = 0;
    for (size_t s = 0; s < c->a->n_splits; s++) {
        if (c->a->plan->splits[s].dielectric != dielectric)
            continue;
        sl_chart_category *cat = &cats[count++];
        cat->name = c->a->plan->splits[s].name;
        cat->values = d->values_V + d->first[s];
        cat->flagged = d->flagged + d->first[s];
        cat->labels = d->labels + d->first[s];
        cat->count = d->first[s + 1] - d->first[s];
        cat->predicted = (sl_est){ c->a->splits[s].cnp_predicted_V,
                                   c->a->splits[s].cnp_predicted_sigma_V };
        c->sum->n_flagged_markers += flagged_markers(d, s);
    }
    return count;
}

static size_t longest_name(const sl_chart_category *cats, size_t count)
{
    size_t longest = 0;
    for (size_t i = 0; i < count; i++)
        if (strlen(cats[i].name) > longest)
            longest = strlen(cats[i].name);
    return longest;
}

/* Bands wide enough for upright split names where the page allows; else the
 * chart module slants them, and the margins make room for the slant. */
static void strip_frame(sl_chart_frame *frame, const sl_chart_category *cats, size_t count,
                        const char *title)
{
    double label_px = LABEL_CHAR_PX * (double)longest_name(cats, count);
    double band = fmax(STRIP_MIN_BAND_PX, label_px / 0.9 + 4.0);
    sl_chart_frame_default(frame, 0.0, 0.0, title);
    frame->embed_style = 0;
    double plot_w = band * (double)count;
    double outside = frame->margin_left_px + frame->margin_right_px + STRIP_LEGEND_PX;
    plot_w = fmin(fmax(plot_w, STRIP_MIN_WIDTH_PX - outside), STRIP_MAX_WIDTH_PX - outside);
    if (label_px > 0.9 * plot_w / (double)count) { /* slanted */
        frame->margin_bottom_px = 24.0 + label_px * LABEL_SLANT_SIN;
        double overhang = label_px * LABEL_SLANT_COS - 0.5 * plot_w / (double)count;
        frame->margin_left_px = fmax(frame->margin_left_px, overhang + 8.0);
    }
    frame->width_px = frame->margin_left_px + frame->margin_right_px + STRIP_LEGEND_PX + plot_w;
    frame->height_px = frame->margin_top_px + STRIP_PLOT_HEIGHT_PX + frame->margin_bottom_px;
}

static void strip_chart(report_ctx *c, const strip_data *d, sl_chart_category *cats,
                        size_t dielectric)
{
    size_t count = fill_categories(cats, c, d, dielectric);
    if (count == 0)
        return;
    const char *name = c->a->plan->dielectrics[dielectric].name;
    char title[160];
    snprintf(title, sizeof title, "Neutrality voltage by split, dielectric %s", name);
    sl_chart_frame frame;
    strip_frame(&frame, cats, count, title);
    sl_chart_buf_printf(c->buf, "<div class=\"stack\" data-dielectric=\"%zu\">\n<h3>",
                        dielectric);
    sl_chart_buf_escape(c->buf, name);
    sl_chart_buf_append(c->buf, "</h3>\n<figure class=\"strip\">");
    sl_chart_strip(c->buf, &frame, cats, count, "split", "neutrality voltage (V)");
    sl_chart_buf_append(c->buf, "</figure>\n");
    sl_report_splits_table(c, dielectric);
    sl_chart_buf_append(c->buf, "</div>\n");
    c->sum->n_strip_charts++;
}

sl_status sl_report_section_splits(report_ctx *c)
{
    strip_data d;
    sl_chart_category *cats = malloc((c->a->n_splits + 1) * sizeof *cats);
    if (!cats || strip_data_build(&d, c->a) != SL_OK) {
        free(cats);
        return SL_ENOMEM;
    }
    sl_report_section_open(c->buf, "splits", "Splits against prediction");
    sl_chart_buf_append(c->buf,
                        "<p>Measured neutrality (Dirac) voltage of every usable device, per "
                        "split, over the predicted value (line) with its &plusmn;1&nbsp;&sigma; "
                        "and &plusmn;3&nbsp;&sigma; bands. Flagged devices are diamonds; devices "
                        "without a usable neutrality point have no point here (see the failure "
                        "list). One chart per dielectric, as the stacks differ in voltage "
                        "scale. Split mean and interval come from the wafer means (the wafer "
                        "is the unit): 95&nbsp;% Student&nbsp;t with wafers&nbsp;&minus;&nbsp;1 "
                        "degrees of freedom, none for a split of one wafer.</p>\n");
    for (size_t k = 0; k < c->a->plan->n_dielectrics; k++)
        strip_chart(c, &d, cats, k);
    sl_report_section_close(c->buf);
    strip_data_free(&d);
    free(cats);
    return c->buf->status;
}

/* ---- effects ---- */

static void effects_chart(report_ctx *c)
{
    size_t n = c->a->n_effects;
    sl_chart_effect *levels = malloc((n ? n : 1) * sizeof *levels);
    if (!levels) {
        c->buf->status = SL_ENOMEM;
        return;
    }
    for (size_t i = 0; i < n; i++) {
        const sl_analyze_effect *e = &c->a->effects[i];
        levels[i] = (sl_chart_effect){ e->level,
                                       { e->planned_per_cm2, e->planned_sigma_per_cm2 },
                                       { e->estimated_per_cm2, e->stderr_per_cm2 },
                                       e->off_plan };
    }
    sl_chart_frame frame;
    double width = fmin(fmax(420.0, 120.0 + 110.0 * (double)n), 900.0);
    sl_chart_frame_default(&frame, width, 340.0, "Doping per level: planned and estimated");
    frame.embed_style = 0;
    frame.margin_left_px = 80.0; /* tick labels like "-1.5e12" beside the axis title */
    sl_chart_buf_append(c->buf, "<figure class=\"effects\">");
    sl_chart_effects(c->buf, &frame, levels, n, 1.0, "doping (cm\xe2\x81\xbb\xc2\xb2)");
    sl_chart_buf_append(c->buf, "</figure>\n");
    free(levels);
}

sl_status sl_report_section_effects(report_ctx *c)
{
    sl_report_section_open(c->buf, "effects", "Level effects against the plan");
    if (c->a->effects_status != SL_OK || c->a->n_effects == 0) {
        sl_report_note(c->buf, c->a->effects_note[0] ? c->a->effects_note
                                                     : "No level effects could be estimated.");
        sl_report_section_close(c->buf);
        return c->buf->status;
    }
    sl_chart_buf_append(c->buf,
                        "<p>Each level's doping as a difference from its factor's reference "
                        "level (the baseline row is baseline plus the reference levels), "
                        "estimated from wafer means by weighted least squares (weights from "
                        "the wafer and device scatter). Error bars: &plusmn;1&nbsp;&sigma; of "
                        "the plan and &plusmn;1 standard error of the estimate. The verdict "
                        "rests on the 95&nbsp;% interval (t with the residual df) of estimate "
                        "&minus; planned against the level's tolerance T: <em>as-planned</em> "
                        "inside [&minus;T,&nbsp;T], <em>off-plan</em> entirely outside, "
                        "<em>differs</em> when it only excludes the plan, "
                        "<em>inconclusive</em> otherwise.</p>\n");
    effects_chart(c);
    sl_report_effects_table(c);
    sl_report_section_close(c->buf);
    return c->buf->status;
}
