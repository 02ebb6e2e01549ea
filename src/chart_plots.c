/* SPDX-License-Identifier: MIT
 * The report's charts composed from the chart primitives: strip chart of
 * splits against predicted bands, x-y chart, estimate-vs-planned chart with
 * error bars and the individuals control chart (see include/splitlot/chart.h).
 */
#include "splitlot/chart.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "chart_internal.h"

#define LEGEND_STRIP_PX 130.0
#define STRIP_LEGEND_PX 170.0  /* the strip chart's legend names its flag interval */
#define LIMIT_STRIP_PX 90.0
#define Y_TICK_TARGET 6
#define X_TICK_TARGET 8
#define GOLDEN_FRACTION 0.6180339887498949

/* ---- shared helpers ------------------------------------------------------- */

/* Running minimum and maximum of the finite values seen. */
typedef struct {
    double lo, hi;
} data_range;

static data_range range_empty(void)
{
    data_range r = { INFINITY, -INFINITY };
    return r;
}

static void range_add(data_range *r, double v)
{
    if (!isfinite(v))
        return;
    r->lo = fmin(r->lo, v);
    r->hi = fmax(r->hi, v);
}

/* Add centre +/- half_width (only the centre when the width is unusable). */
static void range_add_interval(data_range *r, double centre, double half_width)
{
    range_add(r, centre);
    if (isfinite(half_width) && half_width > 0.0) {
        range_add(r, centre - half_width);
        range_add(r, centre + half_width);
    }
}

/* A copy of the frame with room for a legend or labels at the right. */
static sl_chart_frame widen_right(const sl_chart_frame *frame, double extra_px)
{
    sl_chart_frame f = *frame;
    f.margin_right_px += extra_px;
    return f;
}

/* A linear y scale over the range, padded and extended to nice bounds, with
 * its left axis drawn. An empty range becomes [0, 1]. */
static void draw_linear_y(sl_chart_buf *buf, sl_chart_scale *y, const sl_chart_rect *plot,
                          data_range r, const char *title)
{
    sl_chart_ticks ticks;
    sl_chart_scale_linear(y, r.lo, r.hi, plot->y_px + plot->height_px, plot->y_px);
    sl_chart_scale_nice(y, &ticks, Y_TICK_TARGET);
    sl_chart_axis(buf, plot, y, &ticks, SL_CHART_AXIS_LEFT, title);
}

static void note_no_data(sl_chart_buf *buf, const sl_chart_rect *plot, int any_data)
{
    if (!any_data)
        sl_chart_text(buf, plot->x_px + plot->width_px / 2.0, plot->y_px + plot->height_px / 2.0,
                      SL_CHART_ANCHOR_MIDDLE, "note", "no data");
}

static double legend_x(const sl_chart_rect *plot) { return plot->x_px + plot->width_px + 14.0; }

/* Category names gathered from a strided array of structs into a list. */
static const char **gather_names(const void *items, size_t count, size_t stride, size_t offset)
{
    const char **names = malloc((count ? count : 1) * sizeof *names);
    if (!names)
        return NULL;
    for (size_t i = 0; i < count; i++)
        names[i] = *(const char *const *)((const char *)items + i * stride + offset);
    return names;
}

static sl_status draw_category_axis(sl_chart_buf *buf, const sl_chart_rect *plot,
                                    const void *items, size_t count, size_t stride,
                                    size_t offset, const char *title)
{
    const char **names = gather_names(items, count, stride, offset);
    if (!names) {
        buf->status = SL_ENOMEM;
        return SL_ENOMEM;
    }
    sl_chart_axis_categories(buf, plot, names, count, title);
    free(names);
    return buf->status;
}

/* ---- strip chart ---------------------------------------------------------- */

static int has_flag_band(const sl_chart_category *cat)
{
    return cat->has_flag_interval && isfinite(cat->flag_low) && isfinite(cat->flag_high);
}

static int has_bins(const sl_chart_category *cat)
{
    return cat->bins && cat->n_bins > 0 && isfinite(cat->bins_low) && isfinite(cat->bins_high)
           && cat->bins_high > cat->bins_low;
}

static data_range strip_range(const sl_chart_category *cats, size_t count)
{
    data_range r = range_empty();
    for (size_t c = 0; c < count; c++) {
        for (size_t i = 0; i < cats[c].count; i++)
            range_add(&r, cats[c].values[i]);
        if (has_flag_band(&cats[c])) {
            range_add(&r, cats[c].flag_low);
            range_add(&r, cats[c].flag_high);
            range_add_interval(&r, cats[c].predicted.val, cats[c].predicted.sigma);
        } else {
            range_add_interval(&r, cats[c].predicted.val, 3.0 * cats[c].predicted.sigma);
        }
        if (has_bins(&cats[c]))
            for (size_t b = 0; b < cats[c].n_bins; b++)
                if (cats[c].bins[b] > 0) {
                    double w = (cats[c].bins_high - cats[c].bins_low) / (double)cats[c].n_bins;
                    range_add(&r, cats[c].bins_low + w * (double)b);
                    range_add(&r, cats[c].bins_low + w * (double)(b + 1));
                }
    }
    return r;
}

/* The outer band: the flag interval when the category has one, else
 * +/-3 sigma of the prediction; then +/-1 sigma and the predicted line. */
static void strip_bands(sl_chart_buf *buf, const sl_chart_scale *y, double cx, double half_w,
                        const sl_chart_category *cat)
{
    sl_est predicted = cat->predicted;
    if (has_flag_band(cat))
        sl_chart_band(buf, cx - half_w, cx + half_w, sl_chart_scale_px(y, cat->flag_low),
                      sl_chart_scale_px(y, cat->flag_high), "sigma3 flag-interval");
    if (!isfinite(predicted.val))
        return;
    double s = predicted.sigma;
    if (isfinite(s) && s > 0.0) {
        if (!has_flag_band(cat))
            sl_chart_band(buf, cx - half_w, cx + half_w,
                          sl_chart_scale_px(y, predicted.val - 3 * s),
                          sl_chart_scale_px(y, predicted.val + 3 * s), "sigma3");
        sl_chart_band(buf, cx - half_w, cx + half_w, sl_chart_scale_px(y, predicted.val - s),
                      sl_chart_scale_px(y, predicted.val + s), "sigma1");
    }
    double py = sl_chart_scale_px(y, predicted.val);
    sl_chart_segment(buf, cx - half_w, py, cx + half_w, py, "predicted");
}

/* A column of bars, one per non-empty bin, as wide as the count allows
 * (the fullest bin spans half_w on each side of the centre). */
static void strip_density(sl_chart_buf *buf, const sl_chart_scale *y, double cx, double half_w,
                          const sl_chart_category *cat)
{
    size_t top = 0;
    for (size_t b = 0; b < cat->n_bins; b++)
        top = cat->bins[b] > top ? cat->bins[b] : top;
    if (top == 0)
        return;
    double w = (cat->bins_high - cat->bins_low) / (double)cat->n_bins;
    sl_chart_buf_append(buf, "<g class=\"density\">");
    for (size_t b = 0; b < cat->n_bins; b++) {
        if (cat->bins[b] == 0)
            continue;
        double lo = cat->bins_low + w * (double)b, hi = lo + w;
        double y0 = sl_chart_scale_px(y, hi), y1 = sl_chart_scale_px(y, lo);
        double half = fmax(half_w * (double)cat->bins[b] / (double)top, 0.6);
        sl_chart_buf_printf(buf, "<rect class=\"bin\" x=\"%s\" y=\"%s\" width=\"%s\" "
                            "height=\"%s\"><title>%zu devices, %s to ",
                            sl__chart_px_text(cx - half).s, sl__chart_px_text(y0).s,
                            sl__chart_px_text(2.0 * half).s, sl__chart_px_text(y1 - y0).s,
                            cat->bins[b], sl__chart_value_text(lo).s);
        sl_chart_buf_printf(buf, "%s</title></rect>", sl__chart_value_text(hi).s);
    }
    sl_chart_buf_append(buf, "</g>");
}

/* Deterministic sideways spread: golden-ratio fractions fill [-0.5, 0.5)
 * evenly without clumping, whatever the number of points. */
static double spread_offset(size_t index, double width_px)
{
    double f = fmod((double)index * GOLDEN_FRACTION, 1.0);
    return (f - 0.5) * width_px;
}

static void strip_points(sl_chart_buf *buf, const sl_chart_scale *y, double cx, double spread,
                         const sl_chart_category *cat, int flagged_pass)
{
    for (size_t i = 0; i < cat->count; i++) {
        int flagged = cat->flagged && cat->flagged[i];
        if (flagged != flagged_pass || !isfinite(cat->values[i]))
            continue;
        const char *who = cat->labels && cat->labels[i] ? cat->labels[i] : cat->name;
        char tip[256];
        if (cat->tips && cat->tips[i])
            snprintf(tip, sizeof tip, "%s%s", cat->tips[i], flagged ? " (flagged)" : "");
        else
            snprintf(tip, sizeof tip, "%s: %s%s", who ? who : "",
                     sl__chart_value_text(cat->values[i]).s, flagged ? " (flagged)" : "");
        double px = cx + spread_offset(i, spread), py = sl_chart_scale_px(y, cat->values[i]);
        if (flagged)
            sl_chart_marker(buf, px, py, 4.0, SL_CHART_MARKER_DIAMOND, "flagged", tip);
        else
            sl_chart_marker(buf, px, py, 3.0, SL_CHART_MARKER_CIRCLE, NULL, tip);
    }
}

/* The legend names what is drawn, and the outer band for what it is: the
 * flag interval of the first category that has one, else +/-3 sigma of the
 * prediction. */
static void strip_legend(sl_chart_buf *buf, const sl_chart_rect *plot,
                         const sl_chart_category *cats, size_t count)
{
    const char *outer = "predicted \xc2\xb1" "3\xcf\x83";
    int any_bins = 0, any_points = 0, any_line = 0, any_sigma = 0, any_flag = 0;
    for (size_t c = count; c-- > 0;) {
        if (has_flag_band(&cats[c]))
            outer = cats[c].flag_label ? cats[c].flag_label : "flag interval";
        any_bins |= has_bins(&cats[c]);
        any_points |= !has_bins(&cats[c]);
        any_line |= isfinite(cats[c].predicted.val);
        any_sigma |= isfinite(cats[c].predicted.val) && cats[c].predicted.sigma > 0.0;
        any_flag |= has_flag_band(&cats[c]);
    }
    sl_chart_legend_item items[6];
    size_t n = 0;
    if (any_points)
        items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_CIRCLE, NULL, NULL, "measured" };
    if (any_bins)
        items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_BAND, "density", NULL,
                                             "devices per bin" };
    items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_DIAMOND, "flagged", NULL, "flagged" };
    if (any_line)
        items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_LINE, "predicted", NULL, "predicted" };
    if (any_sigma)
        items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_BAND, "sigma1", NULL,
                                             "predicted \xc2\xb1" "1\xcf\x83" };
    if (any_sigma || any_flag)
        items[n++] = (sl_chart_legend_item){ SL_CHART_SWATCH_BAND, "sigma3", NULL, outer };
    sl_chart_legend(buf, legend_x(plot), plot->y_px, items, n);
}

sl_status sl_chart_strip(sl_chart_buf *buf, const sl_chart_frame *frame,
                         const sl_chart_category *categories, size_t count,
                         const char *x_title, const char *y_title)
{
    sl_chart_frame f = widen_right(frame, STRIP_LEGEND_PX);
    sl_status st = sl_chart_frame_open(buf, &f);
    if (st != SL_OK)
        return st;
    sl_chart_rect plot = sl_chart_frame_plot_area(&f);
    data_range r = strip_range(categories, count);
    sl_chart_scale y;
    draw_linear_y(buf, &y, &plot, r, y_title);
    draw_category_axis(buf, &plot, categories, count, sizeof *categories,
                       offsetof(sl_chart_category, name), x_title);
    double band_w = count ? plot.width_px / (double)count : plot.width_px;
    double spread = fmin(0.5 * band_w, 60.0);
    for (size_t c = 0; c < count; c++) {
        double cx = sl_chart_band_center_px(&plot, count, c);
        strip_bands(buf, &y, cx, 0.4 * band_w, &categories[c]);
        if (has_bins(&categories[c]))
            strip_density(buf, &y, cx, spread / 2.0, &categories[c]);
    }
    for (int pass = 0; pass < 2; pass++)
        for (size_t c = 0; c < count; c++)
            strip_points(buf, &y, sl_chart_band_center_px(&plot, count, c), spread,
                         &categories[c], pass);
    note_no_data(buf, &plot, isfinite(r.lo));
    strip_legend(buf, &plot, categories, count);
    return sl_chart_frame_close(buf);
}

/* ---- x-y chart ------------------------------------------------------------ */

static int xy_point_usable(const sl_chart_series *s, size_t i, int log_y)
{
    return isfinite(s->x[i]) && isfinite(s->y[i]) && (!log_y || s->y[i] > 0.0);
}

static void xy_ranges(data_range *rx, data_range *ry, const sl_chart_series *series,
                      size_t count, int log_y)
{
    *rx = range_empty();
    *ry = range_empty();
    for (size_t k = 0; k < count; k++)
        for (size_t i = 0; i < series[k].count; i++)
            if (xy_point_usable(&series[k], i, log_y)) {
                range_add(rx, series[k].x[i]);
                range_add(ry, series[k].y[i]);
            }
}

/* A log y scale over whole decades covering the range, and its axis. */
static void draw_log_y(sl_chart_buf *buf, sl_chart_scale *y, const sl_chart_rect *plot,
                       data_range r, const char *title)
{
    double lo = 1.0, hi = 10.0;
    if (isfinite(r.lo)) {
        lo = pow(10.0, floor(log10(r.lo)));
        hi = pow(10.0, ceil(log10(r.hi)));
        if (hi <= lo)
            hi = lo * 10.0;
    }
    sl_chart_scale_log(y, lo, hi, plot->y_px + plot->height_px, plot->y_px);
    sl_chart_ticks ticks;
    if (sl_chart_ticks_log(&ticks, y) != SL_OK)
        ticks.count = 0;
    sl_chart_axis(buf, plot, y, &ticks, SL_CHART_AXIS_LEFT, title);
}

static void draw_linear_x(sl_chart_buf *buf, sl_chart_scale *x, const sl_chart_rect *plot,
                          data_range r, const char *title)
{
    sl_chart_ticks ticks;
    sl_chart_scale_linear(x, r.lo, r.hi, plot->x_px, plot->x_px + plot->width_px);
    sl_chart_scale_nice(x, &ticks, X_TICK_TARGET);
    sl_chart_axis(buf, plot, x, &ticks, SL_CHART_AXIS_BOTTOM, title);
}

static sl_status xy_line(sl_chart_buf *buf, const sl_chart_scale *x, const sl_chart_scale *y,
                         const sl_chart_series *s, const char *css, int log_y)
{
    double *px = malloc((s->count ? s->count : 1) * 2 * sizeof *px);
    if (!px) {
        buf->status = SL_ENOMEM;
        return SL_ENOMEM;
    }
    double *py = px + s->count;
    for (size_t i = 0; i < s->count; i++) {
        int ok = xy_point_usable(s, i, log_y);
        px[i] = ok ? sl_chart_scale_px(x, s->x[i]) : NAN;
        py[i] = ok ? sl_chart_scale_px(y, s->y[i]) : NAN;
    }
    sl_chart_polyline(buf, px, py, s->count, css);
    free(px);
    return buf->status;
}

static void xy_points(sl_chart_buf *buf, const sl_chart_scale *x, const sl_chart_scale *y,
                      const sl_chart_series *s, const char *css, int log_y)
{
    for (size_t i = 0; i < s->count; i++) {
        if (!xy_point_usable(s, i, log_y))
            continue;
        char tip[96];
        snprintf(tip, sizeof tip, "%s, %s", sl__chart_value_text(s->x[i]).s,
                 sl__chart_value_text(s->y[i]).s);
        sl_chart_marker(buf, sl_chart_scale_px(x, s->x[i]), sl_chart_scale_px(y, s->y[i]), 2.5,
                        SL_CHART_MARKER_CIRCLE, css, tip);
    }
}

/* Only named series get a legend entry; without any, no legend strip. */
static int any_named(const sl_chart_series *series, size_t count)
{
    for (size_t k = 0; k < count; k++)
        if (series[k].name)
            return 1;
    return 0;
}

static void xy_legend(sl_chart_buf *buf, const sl_chart_rect *plot,
                      const sl_chart_series *series, size_t count)
{
    double y = plot->y_px;
    for (size_t k = 0; k < count; k++) {
        if (!series[k].name)
            continue;
        char css[8];
        snprintf(css, sizeof css, "s%zu", k % SL_CHART_SERIES_COLORS);
        sl_chart_legend_item item = { series[k].draw_points ? SL_CHART_SWATCH_CIRCLE
                                                            : SL_CHART_SWATCH_LINE,
                                      css, NULL, series[k].name };
        sl_chart_legend(buf, legend_x(plot), y, &item, 1);
        y += 16.0;
    }
}

sl_status sl_chart_xy(sl_chart_buf *buf, const sl_chart_frame *frame,
                      const sl_chart_series *series, size_t count,
                      const char *x_title, const char *y_title, int log_y)
{
    sl_chart_frame f = any_named(series, count) ? widen_right(frame, LEGEND_STRIP_PX) : *frame;
    sl_status st = sl_chart_frame_open(buf, &f);
    if (st != SL_OK)
        return st;
    sl_chart_rect plot = sl_chart_frame_plot_area(&f);
    data_range rx, ry;
    xy_ranges(&rx, &ry, series, count, log_y);
    sl_chart_scale x, y;
    draw_linear_x(buf, &x, &plot, rx, x_title);
    if (log_y)
        draw_log_y(buf, &y, &plot, ry, y_title);
    else
        draw_linear_y(buf, &y, &plot, ry, y_title);
    for (size_t k = 0; k < count; k++) {
        char css[8];
        snprintf(css, sizeof css, "s%zu", k % SL_CHART_SERIES_COLORS);
        if (series[k].draw_line)
            xy_line(buf, &x, &y, &series[k], css, log_y);
        if (series[k].draw_points)
            xy_points(buf, &x, &y, &series[k], css, log_y);
    }
    note_no_data(buf, &plot, isfinite(rx.lo));
    xy_legend(buf, &plot, series, count);
    return sl_chart_frame_close(buf);
}

/* ---- estimate vs planned ---------------------------------------------------- */

static data_range effects_range(const sl_chart_effect *effects, size_t count, double k)
{
    data_range r = range_empty();
    range_add(&r, 0.0);
    for (size_t i = 0; i < count; i++) {
        range_add_interval(&r, effects[i].planned.val, k * effects[i].planned.sigma);
        range_add_interval(&r, effects[i].estimated.val, k * effects[i].estimated.sigma);
    }
    return r;
}

/* One value with its error bar; a missing sigma draws the marker alone. */
static void value_with_bar(sl_chart_buf *buf, const sl_chart_scale *y, double x, sl_est v,
                           double k, sl_chart_marker_kind kind, const char *css,
                           const char *tooltip)
{
    if (!isfinite(v.val))
        return;
    if (isfinite(v.sigma) && v.sigma > 0.0) {
        double half = k * v.sigma;
        sl_chart_error_bar(buf, x, sl_chart_scale_px(y, v.val - half),
                           sl_chart_scale_px(y, v.val + half), 8.0, css);
    }
    sl_chart_marker(buf, x, sl_chart_scale_px(y, v.val), kind == SL_CHART_MARKER_CIRCLE ? 3.5 : 4.0,
                    kind, css, tooltip);
}

static void effect_level(sl_chart_buf *buf, const sl_chart_scale *y, double cx, double offset,
                         const sl_chart_effect *e, double k)
{
    char tip[192];
    snprintf(tip, sizeof tip, "%s planned: %s \xc2\xb1 %s", e->level ? e->level : "",
             sl__chart_value_text(e->planned.val).s, sl__chart_value_text(k * e->planned.sigma).s);
    value_with_bar(buf, y, cx - offset, e->planned, k, SL_CHART_MARKER_CROSS, "planned s1", tip);
    snprintf(tip, sizeof tip, "%s estimate: %s \xc2\xb1 %s%s", e->level ? e->level : "",
             sl__chart_value_text(e->estimated.val).s,
             sl__chart_value_text(k * e->estimated.sigma).s, e->off_plan ? " (off plan)" : "");
    if (e->off_plan)
        value_with_bar(buf, y, cx + offset, e->estimated, k, SL_CHART_MARKER_DIAMOND,
                       "estimate flagged", tip);
    else
        value_with_bar(buf, y, cx + offset, e->estimated, k, SL_CHART_MARKER_CIRCLE,
                       "estimate s0", tip);
}

static void effects_legend(sl_chart_buf *buf, const sl_chart_rect *plot, double k)
{
    char planned[48], estimate[48];
    snprintf(planned, sizeof planned, "planned \xc2\xb1 %s\xcf\x83", sl__chart_value_text(k).s);
    snprintf(estimate, sizeof estimate, "estimate \xc2\xb1 %s SE", sl__chart_value_text(k).s);
    const sl_chart_legend_item items[3] = {
        { SL_CHART_SWATCH_CROSS, "s1", NULL, planned },
        { SL_CHART_SWATCH_CIRCLE, "s0", NULL, estimate },
        { SL_CHART_SWATCH_DIAMOND, "flagged", NULL, "off plan" },
    };
    sl_chart_legend(buf, legend_x(plot), plot->y_px, items, 3);
}

sl_status sl_chart_effects(sl_chart_buf *buf, const sl_chart_frame *frame,
                           const sl_chart_effect *effects, size_t count,
                           double interval_k, const char *y_title)
{
    double k = isfinite(interval_k) && interval_k > 0.0 ? interval_k : 1.0;
    sl_chart_frame f = widen_right(frame, LEGEND_STRIP_PX);
    sl_status st = sl_chart_frame_open(buf, &f);
    if (st != SL_OK)
        return st;
    sl_chart_rect plot = sl_chart_frame_plot_area(&f);
    sl_chart_scale y;
    draw_linear_y(buf, &y, &plot, effects_range(effects, count, k), y_title);
    draw_category_axis(buf, &plot, effects, count, sizeof *effects,
                       offsetof(sl_chart_effect, level), NULL);
    double zero = sl_chart_scale_px(&y, 0.0);
    sl_chart_segment(buf, plot.x_px, zero, plot.x_px + plot.width_px, zero, "zero");
    double offset = count ? fmin(0.15 * plot.width_px / (double)count, 20.0) : 0.0;
    for (size_t i = 0; i < count; i++)
        effect_level(buf, &y, sl_chart_band_center_px(&plot, count, i), offset, &effects[i], k);
    note_no_data(buf, &plot, count > 0);
    effects_legend(buf, &plot, k);
    return sl_chart_frame_close(buf);
}

/* ---- control chart -------------------------------------------------------- */

/* x positions 1..count, so the scale puts point i at the centre of band i. */
static void draw_sequence_x(sl_chart_buf *buf, sl_chart_scale *x, const sl_chart_rect *plot,
                            const char *const *labels, size_t count, const char *title)
{
    double n = count ? (double)count : 1.0;
    sl_chart_scale_linear(x, 0.5, n + 0.5, plot->x_px, plot->x_px + plot->width_px);
    if (labels) {
        sl_chart_axis_categories(buf, plot, labels, count, title);
        return;
    }
    sl_chart_ticks ticks;
    sl_chart_ticks_nice(&ticks, 1.0, n, X_TICK_TARGET);
    if (ticks.step < 1.0) { /* few samples: number each, they are whole */
        ticks.count = 0;
        for (size_t i = 1; i <= count && i <= SL_CHART_MAX_TICKS; i++)
            ticks.values[ticks.count++] = (double)i;
        ticks.step = 1.0;
        ticks.decimals = 0;
    }
    sl_chart_axis(buf, plot, x, &ticks, SL_CHART_AXIS_BOTTOM, title);
}

static void limit_line(sl_chart_buf *buf, const sl_chart_rect *plot, const sl_chart_scale *y,
                       double value, const char *css, const char *name)
{
    double py = sl_chart_scale_px(y, value);
    sl_chart_segment(buf, plot->x_px, py, plot->x_px + plot->width_px, py, css);
    char label[64];
    snprintf(label, sizeof label, "%s %s", name, sl__chart_value_text(value).s);
    sl_chart_buf_printf(buf, "<text x=\"%s\" y=\"%s\" dy=\".32em\">",
                        sl__chart_px_text(plot->x_px + plot->width_px + 6.0).s,
                        sl__chart_px_text(py).s);
    sl_chart_buf_escape(buf, label);
    sl_chart_buf_append(buf, "</text>");
}

static void control_points(sl_chart_buf *buf, const sl_chart_scale *x, const sl_chart_scale *y,
                           const double *values, const char *const *labels, size_t count,
                           double lower, double upper)
{
    for (size_t i = 0; i < count; i++) {
        double v = values[i];
        if (!isfinite(v))
            continue;
        int out = v < lower || v > upper;
        char tip[128];
        if (labels && labels[i])
            snprintf(tip, sizeof tip, "%s: %s%s", labels[i], sl__chart_value_text(v).s,
                     out ? " (outside limits)" : "");
        else
            snprintf(tip, sizeof tip, "#%zu: %s%s", i + 1, sl__chart_value_text(v).s,
                     out ? " (outside limits)" : "");
        double px = sl_chart_scale_px(x, (double)(i + 1)), py = sl_chart_scale_px(y, v);
        if (out)
            sl_chart_marker(buf, px, py, 4.5, SL_CHART_MARKER_DIAMOND, "flagged", tip);
        else
            sl_chart_marker(buf, px, py, 3.5, SL_CHART_MARKER_CIRCLE, NULL, tip);
    }
}

static sl_status control_trace(sl_chart_buf *buf, const sl_chart_scale *x,
                               const sl_chart_scale *y, const double *values, size_t count)
{
    double *px = malloc((count ? count : 1) * 2 * sizeof *px);
    if (!px) {
        buf->status = SL_ENOMEM;
        return SL_ENOMEM;
    }
    double *py = px + count;
    size_t n = 0;
    for (size_t i = 0; i < count; i++) {
        if (!isfinite(values[i]))
            continue; /* a missing lot is bridged, not a break in time order */
        px[n] = sl_chart_scale_px(x, (double)(i + 1));
        py[n++] = sl_chart_scale_px(y, values[i]);
    }
    sl_chart_polyline(buf, px, py, n, "trace");
    free(px);
    return buf->status;
}

sl_status sl_chart_control(sl_chart_buf *buf, const sl_chart_frame *frame,
                           const double *values, const char *const *labels, size_t count,
                           double center, double lower_limit, double upper_limit,
                           const char *x_title, const char *y_title)
{
    return sl_chart_control_planned(buf, frame, values, labels, count, center, lower_limit,
                                    upper_limit, NAN, x_title, y_title);
}

sl_status sl_chart_control_planned(sl_chart_buf *buf, const sl_chart_frame *frame,
                                   const double *values, const char *const *labels, size_t count,
                                   double center, double lower_limit, double upper_limit,
                                   double planned, const char *x_title, const char *y_title)
{
    if (!isfinite(center) || !isfinite(lower_limit) || !isfinite(upper_limit)
        || lower_limit > upper_limit || (count > 0 && !values))
        return SL_EINPUT;
    sl_chart_frame f = widen_right(frame, LIMIT_STRIP_PX);
    sl_status st = sl_chart_frame_open(buf, &f);
    if (st != SL_OK)
        return st;
    sl_chart_rect plot = sl_chart_frame_plot_area(&f);
    data_range r = range_empty();
    for (size_t i = 0; i < count; i++)
        range_add(&r, values[i]);
    int any = isfinite(r.lo);
    range_add(&r, center);
    range_add(&r, lower_limit);
    range_add(&r, upper_limit);
    if (isfinite(planned))
        range_add(&r, planned);
    sl_chart_scale x, y;
    draw_linear_y(buf, &y, &plot, r, y_title);
    draw_sequence_x(buf, &x, &plot, labels, count, x_title);
    limit_line(buf, &plot, &y, upper_limit, "limit", "upper");
    limit_line(buf, &plot, &y, center, "center", "centre");
    limit_line(buf, &plot, &y, lower_limit, "limit", "lower");
    if (isfinite(planned))
        limit_line(buf, &plot, &y, planned, "predicted", "planned");
    control_trace(buf, &x, &y, values, count);
    control_points(buf, &x, &y, values, labels, count, lower_limit, upper_limit);
    note_no_data(buf, &plot, any);
    return sl_chart_frame_close(buf);
}
