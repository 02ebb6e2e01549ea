/* SPDX-License-Identifier: MIT
 * SVG frame, stylesheet, axes and drawing primitives of the chart module
 * (see include/splitlot/chart.h). Colours come from CSS classes so a report
 * can restyle every chart at once; only data-driven fills are inline.
 */
#include "splitlot/chart.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "chart_internal.h"

#define PX(v) (sl__chart_px_text(v).s)

/* Series colours use `color` and currentColor, so one class colours a point,
 * its line, its error bar and its legend swatch alike. */
static const char stylesheet[] =
    ".sl-chart{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;font-size:11px;"
    "color:#2c65a3;background:#fff;-webkit-print-color-adjust:exact;print-color-adjust:exact}"
    ".sl-chart text{fill:#222;stroke:none}"
    ".sl-chart .chart-title{font-size:13px;font-weight:600}"
    ".sl-chart .axis line{stroke:#444}"
    ".sl-chart .axis .grid{stroke:#e4e4e4}"
    ".sl-chart .point,.sl-chart .swatch{fill:currentColor;stroke:#fff;stroke-width:.6}"
    ".sl-chart .point.cross,.sl-chart .swatch.cross{fill:none;stroke:currentColor;stroke-width:1.6}"
    ".sl-chart .line,.sl-chart .swatch-line{fill:none;stroke:currentColor;stroke-width:1.5}"
    ".sl-chart .trace{color:#9a9a9a;stroke-width:1}"
    ".sl-chart .errbar{fill:none;stroke:currentColor;stroke-width:1.2}"
    ".sl-chart .band{stroke:none}"
    ".sl-chart .sigma3{color:#9cbbdc;fill:currentColor;fill-opacity:.25}"
    ".sl-chart .sigma1{color:#6f98c6;fill:currentColor;fill-opacity:.4}"
    ".sl-chart .density,.sl-chart .swatch.density{fill:#3d5f85;fill-opacity:.75;stroke:none}"
    ".sl-chart .die-axis{font-size:9px;fill:#555}"
    ".sl-chart .predicted{stroke:#1c416b;stroke-width:1.5}"
    ".sl-chart .center{stroke:#333;stroke-width:1.2}"
    ".sl-chart .limit{stroke:#a6431a;stroke-width:1.2;stroke-dasharray:6 3}"
    ".sl-chart .zero{stroke:#777;stroke-dasharray:3 3}"
    ".sl-chart .s0{color:#2c65a3}.sl-chart .s1{color:#d07a1f}.sl-chart .s2{color:#555}"
    ".sl-chart .s3{color:#7a4fa0}.sl-chart .s4{color:#2f8f86}.sl-chart .s5{color:#8c4a20}"
    ".sl-chart .flagged{color:#a6431a}"
    ".sl-chart .point.flagged,.sl-chart .swatch.flagged{stroke:#000;stroke-width:1}"
    /* The wafer is mid grey so that near-zero (light neutral) dies stand
     * out from the bare wafer around them. */
    ".sl-chart .wafer{fill:#dedede;stroke:#6b6b6b;stroke-width:1}"
    ".sl-chart .notch{fill:#777}"
    ".sl-chart .die{stroke:#fff;stroke-width:.6}"
    ".sl-chart .die.flagged{stroke:#000;stroke-width:2.2}"
    ".sl-chart .fine .die{stroke:none}.sl-chart .fine .die.flagged{stroke:#000;stroke-width:1}"
    ".sl-chart .nd{fill:#a9a9a9}.sl-chart .ndx{stroke:#2b2b2b;stroke-width:1.2}"
    ".sl-chart .flag-cell{fill:#fff;stroke:#000;stroke-width:2.2}"
    ".sl-chart .note{fill:#666;font-style:italic}";

const char *sl_chart_stylesheet(void) { return stylesheet; }

void sl_chart_frame_default(sl_chart_frame *out, double width_px, double height_px,
                            const char *title)
{
    out->width_px = width_px;
    out->height_px = height_px;
    out->margin_left_px = 64.0;
    out->margin_right_px = 16.0;
    out->margin_top_px = title ? 34.0 : 14.0;
    out->margin_bottom_px = 48.0;
    out->title = title;
    out->description = NULL;
    out->embed_style = 1;
}

sl_chart_rect sl_chart_frame_plot_area(const sl_chart_frame *frame)
{
    sl_chart_rect r;
    r.x_px = frame->margin_left_px;
    r.y_px = frame->margin_top_px;
    r.width_px = fmax(frame->width_px - frame->margin_left_px - frame->margin_right_px, 0.0);
    r.height_px = fmax(frame->height_px - frame->margin_top_px - frame->margin_bottom_px, 0.0);
    return r;
}

static int frame_size_ok(const sl_chart_frame *frame)
{
    return isfinite(frame->width_px) && isfinite(frame->height_px) && frame->width_px > 0.0
           && frame->height_px > 0.0 && frame->width_px < 1e6 && frame->height_px < 1e6;
}

sl_status sl_chart_frame_open(sl_chart_buf *buf, const sl_chart_frame *frame)
{
    if (!frame_size_ok(frame))
        return SL_EINPUT;
    const char *name = frame->title && *frame->title ? frame->title : "chart";
    sl_chart_buf_printf(buf,
                        "<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"sl-chart\" "
                        "viewBox=\"0 0 %s %s\" width=\"%s\" height=\"%s\" role=\"img\" "
                        "aria-label=\"",
                        PX(frame->width_px), PX(frame->height_px), PX(frame->width_px),
                        PX(frame->height_px));
    sl_chart_buf_escape(buf, name);
    sl_chart_buf_append(buf, "\"><title>");
    sl_chart_buf_escape(buf, name);
    sl_chart_buf_append(buf, "</title>");
    if (frame->description) {
        sl_chart_buf_append(buf, "<desc>");
        sl_chart_buf_escape(buf, frame->description);
        sl_chart_buf_append(buf, "</desc>");
    }
    if (frame->embed_style)
        sl_chart_buf_printf(buf, "<style>%s</style>", stylesheet);
    if (frame->title && *frame->title)
        sl_chart_text(buf, frame->width_px / 2.0, 20.0, SL_CHART_ANCHOR_MIDDLE, "chart-title",
                      frame->title);
    return buf->status;
}

sl_status sl_chart_frame_close(sl_chart_buf *buf) { return sl_chart_buf_append(buf, "</svg>\n"); }

static const char *anchor_name(sl_chart_anchor anchor)
{
    switch (anchor) {
    case SL_CHART_ANCHOR_MIDDLE: return "middle";
    case SL_CHART_ANCHOR_END: return "end";
    default: return "start";
    }
}

/* Opening of a <text> element up to its content; extra goes in verbatim. */
static void text_open(sl_chart_buf *buf, double x_px, double y_px, sl_chart_anchor anchor,
                      const char *css_class, const char *extra)
{
    sl_chart_buf_printf(buf, "<text x=\"%s\" y=\"%s\"", PX(x_px), PX(y_px));
    if (anchor != SL_CHART_ANCHOR_START)
        sl_chart_buf_printf(buf, " text-anchor=\"%s\"", anchor_name(anchor));
    if (css_class && *css_class)
        sl_chart_buf_printf(buf, " class=\"%s\"", css_class);
    sl_chart_buf_printf(buf, "%s>", extra ? extra : "");
}

sl_status sl_chart_text(sl_chart_buf *buf, double x_px, double y_px, sl_chart_anchor anchor,
                        const char *css_class, const char *text)
{
    if (!text || !*text)
        return buf->status;
    text_open(buf, x_px, y_px, anchor, css_class, NULL);
    sl_chart_buf_escape(buf, text);
    return sl_chart_buf_append(buf, "</text>");
}

sl_status sl_chart_segment(sl_chart_buf *buf, double x0_px, double y0_px, double x1_px,
                           double y1_px, const char *css_class)
{
    if (!isfinite(x0_px) || !isfinite(y0_px) || !isfinite(x1_px) || !isfinite(y1_px))
        return buf->status;
    sl_chart_buf_append(buf, "<line");
    if (css_class && *css_class)
        sl_chart_buf_printf(buf, " class=\"%s\"", css_class);
    return sl_chart_buf_printf(buf, " x1=\"%s\" y1=\"%s\" x2=\"%s\" y2=\"%s\"/>", PX(x0_px),
                               PX(y0_px), PX(x1_px), PX(y1_px));
}

/* ---- axes ---------------------------------------------------------------- */

static int inside_domain(const sl_chart_scale *scale, double v)
{
    double lo = scale->domain_min, hi = scale->domain_max;
    double slack = 1e-9 * fabs(hi - lo);
    return v >= lo - slack && v <= hi + slack;
}

static void left_tick(sl_chart_buf *buf, const sl_chart_rect *plot, double y, const char *label)
{
    double x = plot->x_px;
    sl_chart_segment(buf, x, y, x + plot->width_px, y, "grid");
    sl_chart_segment(buf, x - 5.0, y, x, y, NULL);
    text_open(buf, x - 8.0, y, SL_CHART_ANCHOR_END, NULL, " dy=\".32em\"");
    sl_chart_buf_escape(buf, label);
    sl_chart_buf_append(buf, "</text>");
}

static void bottom_tick(sl_chart_buf *buf, const sl_chart_rect *plot, double x, const char *label)
{
    double y = plot->y_px + plot->height_px;
    sl_chart_segment(buf, x, plot->y_px, x, y, "grid");
    sl_chart_segment(buf, x, y, x, y + 5.0, NULL);
    sl_chart_text(buf, x, y + 17.0, SL_CHART_ANCHOR_MIDDLE, NULL, label);
}

static void left_title(sl_chart_buf *buf, const sl_chart_rect *plot, const char *title)
{
    if (!title || !*title)
        return;
    double cx = fmax(plot->x_px - 48.0, 12.0), cy = plot->y_px + plot->height_px / 2.0;
    sl_chart_buf_printf(buf,
                        "<text class=\"axis-title\" text-anchor=\"middle\" "
                        "transform=\"translate(%s %s) rotate(-90)\">",
                        PX(cx), PX(cy));
    sl_chart_buf_escape(buf, title);
    sl_chart_buf_append(buf, "</text>");
}

static void bottom_title(sl_chart_buf *buf, const sl_chart_rect *plot, const char *title)
{
    sl_chart_text(buf, plot->x_px + plot->width_px / 2.0, plot->y_px + plot->height_px + 38.0,
                  SL_CHART_ANCHOR_MIDDLE, "axis-title", title);
}

sl_status sl_chart_axis(sl_chart_buf *buf, const sl_chart_rect *plot,
                        const sl_chart_scale *scale, const sl_chart_ticks *ticks,
                        sl_chart_axis_side side, const char *title)
{
    double x0 = plot->x_px, y1 = plot->y_px + plot->height_px;
    sl_chart_buf_append(buf, "<g class=\"axis\">");
    for (size_t i = 0; i < ticks->count; i++) {
        double v = ticks->values[i];
        if (!inside_domain(scale, v))
            continue;
        char label[48];
        sl_chart_tick_label(label, sizeof label, v, ticks);
        double p = sl_chart_scale_px(scale, v);
        if (side == SL_CHART_AXIS_LEFT)
            left_tick(buf, plot, p, label);
        else
            bottom_tick(buf, plot, p, label);
    }
    if (side == SL_CHART_AXIS_LEFT) {
        sl_chart_segment(buf, x0, plot->y_px, x0, y1, NULL);
        left_title(buf, plot, title);
    } else {
        sl_chart_segment(buf, x0, y1, x0 + plot->width_px, y1, NULL);
        bottom_title(buf, plot, title);
    }
    return sl_chart_buf_append(buf, "</g>");
}

double sl_chart_band_center_px(const sl_chart_rect *plot, size_t count, size_t i)
{
    if (count == 0)
        return plot->x_px + plot->width_px / 2.0;
    return plot->x_px + plot->width_px * ((double)i + 0.5) / (double)count;
}

/* Labels slant when their estimated width (6 px a character) would collide. */
static int labels_need_slant(const sl_chart_rect *plot, const char *const *names, size_t count)
{
    size_t longest = 0;
    for (size_t i = 0; i < count; i++)
        if (names[i] && strlen(names[i]) > longest)
            longest = strlen(names[i]);
    return count > 0 && (double)longest * 6.0 > 0.9 * plot->width_px / (double)count;
}

sl_status sl_chart_axis_categories(sl_chart_buf *buf, const sl_chart_rect *plot,
                                   const char *const *names, size_t count,
                                   const char *title)
{
    double y = plot->y_px + plot->height_px;
    int slant = names && labels_need_slant(plot, names, count);
    sl_chart_buf_append(buf, "<g class=\"axis\">");
    for (size_t i = 0; names && i < count; i++) {
        double x = sl_chart_band_center_px(plot, count, i);
        sl_chart_segment(buf, x, y, x, y + 5.0, NULL);
        if (!slant) {
            sl_chart_text(buf, x, y + 17.0, SL_CHART_ANCHOR_MIDDLE, NULL, names[i]);
            continue;
        }
        char extra[96];
        snprintf(extra, sizeof extra, " transform=\"rotate(-30 %s %s)\"", PX(x), PX(y + 14.0));
        text_open(buf, x, y + 14.0, SL_CHART_ANCHOR_END, NULL, extra);
        sl_chart_buf_escape(buf, names[i]);
        sl_chart_buf_append(buf, "</text>");
    }
    sl_chart_segment(buf, plot->x_px, y, plot->x_px + plot->width_px, y, NULL);
    if (!slant)
        bottom_title(buf, plot, title);
    return sl_chart_buf_append(buf, "</g>");
}

/* ---- markers and shapes --------------------------------------------------- */

static void open_shape(sl_chart_buf *buf, const char *element, const char *base_class,
                       sl_chart_marker_kind kind, const char *css_class)
{
    sl_chart_buf_printf(buf, "<%s class=\"%s%s", element, base_class,
                        kind == SL_CHART_MARKER_CROSS ? " cross" : "");
    if (css_class && *css_class)
        sl_chart_buf_printf(buf, " %s", css_class);
    sl_chart_buf_append(buf, "\"");
}

static void close_shape(sl_chart_buf *buf, const char *element, const char *tooltip)
{
    if (!tooltip) {
        sl_chart_buf_append(buf, "/>");
        return;
    }
    sl_chart_buf_append(buf, "><title>");
    sl_chart_buf_escape(buf, tooltip);
    sl_chart_buf_printf(buf, "</title></%s>", element);
}

/* A marker with a chosen base class ("point" in plots, "swatch" in legends,
 * so that counting points never counts the legend). */
static sl_status draw_marker(sl_chart_buf *buf, double x, double y, double r,
                             sl_chart_marker_kind kind, const char *base_class,
                             const char *css_class, const char *tooltip)
{
    if (!isfinite(x) || !isfinite(y) || !isfinite(r))
        return buf->status;
    if (kind == SL_CHART_MARKER_CIRCLE) {
        open_shape(buf, "circle", base_class, kind, css_class);
        sl_chart_buf_printf(buf, " cx=\"%s\" cy=\"%s\" r=\"%s\"", PX(x), PX(y), PX(r));
        close_shape(buf, "circle", tooltip);
        return buf->status;
    }
    open_shape(buf, "path", base_class, kind, css_class);
    if (kind == SL_CHART_MARKER_DIAMOND) {
        double d = r * 1.3; /* same visual weight as the circle */
        sl_chart_buf_printf(buf, " d=\"M%s %sl%s %sl-%s %sl-%s -%sz\"", PX(x), PX(y - d), PX(d),
                            PX(d), PX(d), PX(d), PX(d), PX(d));
    } else {
        sl_chart_buf_printf(buf, " d=\"M%s %sl%s %sm0 -%sl-%s %s\"", PX(x - r), PX(y - r),
                            PX(2 * r), PX(2 * r), PX(2 * r), PX(2 * r), PX(2 * r));
    }
    close_shape(buf, "path", tooltip);
    return buf->status;
}

sl_status sl_chart_marker(sl_chart_buf *buf, double x_px, double y_px, double radius_px,
                          sl_chart_marker_kind kind, const char *css_class,
                          const char *tooltip)
{
    return draw_marker(buf, x_px, y_px, radius_px, kind, "point", css_class, tooltip);
}

sl_status sl_chart_polyline(sl_chart_buf *buf, const double *x_px, const double *y_px,
                            size_t count, const char *css_class)
{
    int open = 0;
    for (size_t i = 0; i < count; i++) {
        if (!isfinite(x_px[i]) || !isfinite(y_px[i])) {
            if (open)
                sl_chart_buf_append(buf, "\"/>");
            open = 0;
            continue;
        }
        if (!open)
            sl_chart_buf_printf(buf, "<polyline class=\"line%s%s\" points=\"",
                                css_class && *css_class ? " " : "", css_class ? css_class : "");
        else
            sl_chart_buf_append(buf, " ");
        sl_chart_buf_printf(buf, "%s,%s", PX(x_px[i]), PX(y_px[i]));
        open = 1;
    }
    if (open)
        sl_chart_buf_append(buf, "\"/>");
    return buf->status;
}

sl_status sl_chart_error_bar(sl_chart_buf *buf, double x_px, double y_low_px,
                             double y_high_px, double cap_width_px, const char *css_class)
{
    if (!isfinite(x_px) || !isfinite(y_low_px) || !isfinite(y_high_px) || !isfinite(cap_width_px))
        return buf->status;
    double h = cap_width_px / 2.0;
    sl_chart_buf_printf(buf, "<path class=\"errbar%s%s\"", css_class && *css_class ? " " : "",
                        css_class ? css_class : "");
    return sl_chart_buf_printf(buf, " d=\"M%s %sV%sM%s %sH%sM%s %sH%s\"/>", PX(x_px),
                               PX(y_low_px), PX(y_high_px), PX(x_px - h), PX(y_low_px),
                               PX(x_px + h), PX(x_px - h), PX(y_high_px), PX(x_px + h));
}

sl_status sl_chart_band(sl_chart_buf *buf, double x0_px, double x1_px, double y0_px,
                        double y1_px, const char *css_class)
{
    if (!isfinite(x0_px) || !isfinite(x1_px) || !isfinite(y0_px) || !isfinite(y1_px))
        return buf->status;
    sl_chart_buf_printf(buf, "<rect class=\"band%s%s\"", css_class && *css_class ? " " : "",
                        css_class ? css_class : "");
    return sl_chart_buf_printf(buf, " x=\"%s\" y=\"%s\" width=\"%s\" height=\"%s\"/>",
                               PX(fmin(x0_px, x1_px)), PX(fmin(y0_px, y1_px)),
                               PX(fabs(x1_px - x0_px)), PX(fabs(y1_px - y0_px)));
}

/* ---- legend ---------------------------------------------------------------- */

/* The wafer map's "no usable device" cell: grey square with an x. */
sl_status sl__chart_unusable_cell(sl_chart_buf *buf, double x_px, double y_px, double size_px)
{
    double s = size_px, m = size_px * 0.2;
    sl_chart_buf_printf(buf, "<path class=\"nd\" d=\"M%s %sh%sv%sh-%sz\"/>", PX(x_px), PX(y_px),
                        PX(s), PX(s), PX(s));
    return sl_chart_buf_printf(buf, "<path class=\"ndx\" d=\"M%s %sl%s %sm0 -%sl-%s %s\"/>",
                               PX(x_px + m), PX(y_px + m), PX(s - 2 * m), PX(s - 2 * m),
                               PX(s - 2 * m), PX(s - 2 * m), PX(s - 2 * m));
}

static sl_chart_marker_kind swatch_marker(sl_chart_swatch swatch)
{
    if (swatch == SL_CHART_SWATCH_DIAMOND)
        return SL_CHART_MARKER_DIAMOND;
    return swatch == SL_CHART_SWATCH_CROSS ? SL_CHART_MARKER_CROSS : SL_CHART_MARKER_CIRCLE;
}

static void legend_swatch(sl_chart_buf *buf, double x, double cy, const sl_chart_legend_item *it)
{
    switch (it->swatch) {
    case SL_CHART_SWATCH_CIRCLE:
    case SL_CHART_SWATCH_DIAMOND:
    case SL_CHART_SWATCH_CROSS:
        draw_marker(buf, x + 6.0, cy, it->swatch == SL_CHART_SWATCH_CIRCLE ? 3.5 : 3.0,
                    swatch_marker(it->swatch), "swatch", it->css_class, NULL);
        break;
    case SL_CHART_SWATCH_LINE:
        sl_chart_buf_printf(buf, "<line class=\"swatch-line %s\" x1=\"%s\" y1=\"%s\" x2=\"%s\" y2=\"%s\"/>",
                            it->css_class ? it->css_class : "", PX(x), PX(cy), PX(x + 12.0), PX(cy));
        break;
    case SL_CHART_SWATCH_BAND:
        sl_chart_buf_printf(buf, "<rect class=\"swatch %s\" x=\"%s\" y=\"%s\" width=\"12\" height=\"10\"",
                            it->css_class ? it->css_class : "", PX(x), PX(cy - 5.0));
        if (it->fill)
            sl_chart_buf_printf(buf, " fill=\"%s\"", it->fill);
        sl_chart_buf_append(buf, "/>");
        break;
    case SL_CHART_SWATCH_UNUSABLE:
        sl__chart_unusable_cell(buf, x, cy - 6.0, 12.0);
        break;
    }
}

sl_status sl_chart_legend(sl_chart_buf *buf, double x_px, double y_px,
                          const sl_chart_legend_item *items, size_t count)
{
    sl_chart_buf_append(buf, "<g class=\"legend\">");
    for (size_t i = 0; i < count; i++) {
        double cy = y_px + 16.0 * (double)i + 8.0;
        legend_swatch(buf, x_px, cy, &items[i]);
        text_open(buf, x_px + 18.0, cy, SL_CHART_ANCHOR_START, NULL, " dy=\".32em\"");
        sl_chart_buf_escape(buf, items[i].label);
        sl_chart_buf_append(buf, "</text>");
    }
    return sl_chart_buf_append(buf, "</g>");
}
