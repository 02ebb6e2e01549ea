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
#define STRIP_LEGEND_PX 170.0 /* the strip the chart takes from the plot for its legend */
#define LABEL_CHAR_PX 6.0    /* the chart module's estimate of a label character */
#define LABEL_SLANT_SIN 0.5  /* slanted category labels run at 30 degrees */
#define LABEL_SLANT_COS 0.866

static size_t flagged_markers(const report_strip *st)
{
    size_t n = 0;
    for (size_t k = 0; k < st->n_points; k++)
        n += st->flagged[k] && isfinite(st->values_V[k]);
    return n;
}

/* The flag interval as the legend names it. */
static const char flag_label[] = "flag interval";

static size_t fill_categories(sl_chart_category *cats, report_ctx *c, size_t dielectric)
{
    size_t count = 0;
    for (size_t s = 0; s < c->a->n_splits; s++) {
        if (c->a->plan->splits[s].dielectric != dielectric)
            continue;
        const report_strip *st = &c->data.strips[s];
        const sl_analyze_split *sp = &c->a->splits[s];
        sl_chart_category *cat = &cats[count++];
        memset(cat, 0, sizeof *cat);
        cat->name = c->a->plan->splits[s].name;
        cat->values = st->values_V;
        cat->flagged = st->flagged;
        cat->labels = st->label_ptrs;
        cat->count = st->n_points;
        cat->predicted = (sl_est){ sp->cnp_predicted_V, sp->cnp_predicted_sigma_V };
        cat->has_flag_interval = 1;
        cat->flag_low = sp->flag_low_V;
        cat->flag_high = sp->flag_high_V;
        cat->flag_label = flag_label;
        if (st->binned) {
            cat->bins = st->bins;
            cat->n_bins = SL_REPORT_STRIP_BINS;
            cat->bins_low = st->min_V;
            cat->bins_high = st->max_V > st->min_V ? st->max_V : st->min_V + 1e-6;
        /* the bins take what is not flagged; points the rest */
        }
        c->sum->n_flagged_markers += flagged_markers(st);
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

/* Flagged devices of density strips left off the chart, as a sentence. */
static void strip_notes(report_ctx *c, size_t dielectric)
{
    size_t binned = 0, left_off = 0;
    for (size_t s = 0; s < c->a->n_splits; s++)
        if (c->a->plan->splits[s].dielectric == dielectric && c->data.strips[s].binned) {
            binned++;
            left_off += c->data.strips[s].n_flagged_not_drawn;
        }
    if (binned == 0)
        return;
    sl_chart_buf_printf(c->buf, "<p class=\"small\">%zu split%s with more than %d usable "
                        "devices drawn as a density strip (%d bins over the measured range; "
                        "bar width: devices per bin); flagged devices drawn on top as points",
                        binned, binned == 1 ? "" : "s", SL_REPORT_STRIP_POINTS_MAX,
                        SL_REPORT_STRIP_BINS);
    if (left_off)
        sl_chart_buf_printf(c->buf, ", the first %d per split; %zu more are in the "
                            "failure-analysis list and in <code>splitlot compare</code>",
                            SL_REPORT_STRIP_OUTLIERS_MAX, left_off);
    sl_chart_buf_append(c->buf, ".</p>\n");
}

static void strip_chart(report_ctx *c, sl_chart_category *cats, size_t dielectric)
{
    size_t count = fill_categories(cats, c, dielectric);
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
    strip_notes(c, dielectric);
    sl__report_splits_table(c, dielectric);
    sl__report_window_table(c, dielectric);
    sl_chart_buf_append(c->buf, "</div>\n");
    c->sum->n_strip_charts++;
}

sl_status sl__report_section_splits(report_ctx *c)
{
    sl_chart_category *cats = malloc((c->a->n_splits + 1) * sizeof *cats);
    if (!cats)
        return SL_ENOMEM;
    sl__report_section_open(c->buf, "splits", "Splits against prediction");
    sl_chart_buf_append(c->buf,
                        "<p>Measured neutrality (Dirac) voltage of every usable device, per "
                        "split, over the predicted value (line) with its &plusmn;1&nbsp;&sigma; "
                        "band and the <strong>flag interval</strong>: the band outside which a "
                        "device is flagged off-prediction, predicted &plusmn;3&nbsp;"
                        "&radic;(&sigma;<sub>pred</sub><sup>2</sup> + "
                        "spread<sup>2</sup>), spread the device spread about the wafer medians "
                        "pooled over the dielectric. Flagged devices are diamonds (also those "
                        "flagged as outliers about their wafer's median); devices without a "
                        "usable neutrality point have no point here (see the failure list). One "
                        "chart per dielectric, as the stacks differ in voltage scale. Split mean "
                        "and interval in the table come from the wafer means (the wafer is the "
                        "unit): 95&nbsp;% Student&nbsp;t with wafers&nbsp;&minus;&nbsp;1 degrees "
                        "of freedom, none for a split of one wafer.</p>\n");
    for (size_t k = 0; k < c->a->plan->n_dielectrics; k++)
        strip_chart(c, cats, k);
    sl__report_section_close(c->buf);
    free(cats);
    return c->buf->status;
}

/* ---- device parameters ---- */

static const struct {
    const char *id, *title, *axis;
} parameter_charts[REPORT_QUANTITIES] = {
    { "mobility", "Mobility by split", "mobility (log\xe2\x82\x81\xe2\x82\x80 cm\xc2\xb2/V s)" },
    { "n0", "Residual density n\xe2\x82\x80 by split",
      "n\xe2\x82\x80 (log\xe2\x82\x81\xe2\x82\x80 cm\xe2\x81\xbb\xc2\xb2)" },
    { "hysteresis", "Hysteresis by split", "hysteresis (V)" },
};

/* The line a parameter is drawn against: for mobility the plan's expected
 * mobility of the split's dielectric (none without one), for n0 the
 * residual density expected at the view's temperature
 * (floor_predicted_per_cm2); none for hysteresis. */
static sl_est parameter_reference(const report_ctx *c, size_t split, report_quantity q)
{
    sl_est none = { NAN, NAN };
    double expected = c->a->splits[split].mobility_expected_cm2_per_Vs;
    if (q == REPORT_MOBILITY)
        return expected > 0.0 ? (sl_est){ log10(expected), 0.0 } : none;
    if (q != REPORT_N0 || !c->a->split_floor_per_cm2)
        return none;
    double floor = hypot(c->a->split_floor_per_cm2[split], c->a->plan->disorder_density_per_cm2);
    return floor > 0.0 ? (sl_est){ log10(floor), 0.0 } : none;
}

static void parameter_chart(report_ctx *c, sl_chart_category *cats, report_quantity q)
{
    size_t count = 0;
    for (size_t s = 0; s < c->a->n_splits; s++) {
        const report_strip *st = &c->data.quantity[q][s];
        sl_chart_category *cat = &cats[count++];
        memset(cat, 0, sizeof *cat);
        cat->name = c->a->plan->splits[s].name;
        cat->values = st->values_V;
        cat->flagged = st->flagged;
        cat->tips = st->label_ptrs; /* device and value in its unit, not its log */
        cat->count = st->n_points;
        cat->predicted = parameter_reference(c, s, q);
        if (st->binned) {
            cat->bins = st->bins;
            cat->n_bins = SL_REPORT_STRIP_BINS;
            cat->bins_low = st->min_V;
            cat->bins_high = st->max_V;
        }
    }
    sl_chart_frame frame;
    strip_frame(&frame, cats, count, parameter_charts[q].title);
    sl_chart_buf_printf(c->buf, "<figure class=\"strip parameter\" data-parameter=\"%s\">",
                        parameter_charts[q].id);
    sl_chart_strip(c->buf, &frame, cats, count, "split", parameter_charts[q].axis);
    sl_chart_buf_append(c->buf, "</figure>\n");
}

/* Mobility, n0 and hysteresis of the usable devices per split, as strips
 * (density strips for large splits, as the neutrality voltage's); a
 * parameter no device has is named, not drawn. */
sl_status sl__report_section_parameters(report_ctx *c)
{
    sl_chart_category *cats = malloc((c->a->n_splits + 1) * sizeof *cats);
    if (!cats)
        return SL_ENOMEM;
    sl__report_section_open(c->buf, "parameters", "Device parameters by split");
    sl_chart_buf_append(c->buf,
                        "<p>Fitted mobility and residual density n<sub>0</sub> (logarithmic: "
                        "their spread is multiplicative) and hysteresis of the usable devices, "
                        "per split; flagged devices are diamonds. The line on the n<sub>0</sub> "
                        "chart is the residual density expected at the measurement temperature, "
                        "&radic;(n<sub>th</sub><sup>2</sup> + n*<sup>2</sup>) of the thermal "
                        "floor and the plan's disorder density (a common approximation); a "
                        "device below the thermal floor itself is flagged. The line on the "
                        "mobility chart is the plan's expected mobility of the split's "
                        "dielectric, where the plan gives one. The table gives each split's "
                        "median and spread (1.4826 times the median absolute deviation) over its "
                        "usable devices that have the value, and judges the median mobility off "
                        "plan when it lies outside the planned mean &plusmn;3&nbsp;&sigma;.</p>\n");
    sl__report_parameters_table(c);
    sl_chart_buf_append(c->buf, "<div class=\"charts\">\n");
    for (int q = 0; q < REPORT_QUANTITIES; q++) {
        if (c->data.n_quantity_values[q] > 0) {
            parameter_chart(c, cats, (report_quantity)q);
        } else {
            char text[128];
            snprintf(text, sizeof text, "No device of this view has a %s.",
                     q == REPORT_MOBILITY ? "mobility" : q == REPORT_N0 ? "residual density"
                                                                        : "hysteresis");
            sl__report_note(c->buf, text);
        }
    }
    sl_chart_buf_append(c->buf, "</div>\n");
    sl__report_section_close(c->buf);
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

sl_status sl__report_section_effects(report_ctx *c)
{
    sl__report_section_open(c->buf, "effects", "Level effects against the plan");
    if (c->a->effects_status != SL_OK || c->a->n_effects == 0) {
        sl__report_note(c->buf, c->a->effects_note[0] ? c->a->effects_note
                                                     : "No level effects could be estimated.");
        sl__report_section_close(c->buf);
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
    sl__report_effects_table(c);
    sl__report_section_close(c->buf);
    return c->buf->status;
}
