/* SPDX-License-Identifier: MIT
 * splitlot's diverging colour scale (blue - warm neutral - orange/brown), the
 * WCAG relative luminance used to check it, and its legend bar (see
 * include/splitlot/chart.h).
 */
#include "splitlot/chart.h"

#include <math.h>
#include <stdio.h>

#include "chart_internal.h"

/* Stops of one half of the scale at |t| = 0, 0.5, 1. Chosen so that every
 * channel falls from the centre outward on both sides: lightness then falls
 * monotonically along each half, and the two ends have about the same
 * luminance (0.08) so neither sign looks more important. Blue against
 * orange keeps the halves apart under red-green colour blindness. */
static const sl_chart_rgb centre_stop = { 244, 241, 236 };
static const sl_chart_rgb negative_stops[2] = { { 146, 182, 214 }, { 30, 78, 142 } };
static const sl_chart_rgb positive_stops[2] = { { 232, 168, 102 }, { 128, 62, 14 } };

static unsigned char mix_channel(unsigned char a, unsigned char b, double f)
{
    return (unsigned char)lround((double)a + f * ((double)b - (double)a));
}

static sl_chart_rgb mix(sl_chart_rgb a, sl_chart_rgb b, double f)
{
    sl_chart_rgb c = { mix_channel(a.r, b.r, f), mix_channel(a.g, b.g, f),
                       mix_channel(a.b, b.b, f) };
    return c;
}

sl_chart_rgb sl_chart_diverging_rgb(double value, double max_abs)
{
    if (!isfinite(value) || !isfinite(max_abs) || !(max_abs > 0.0))
        return centre_stop;
    double t = fmin(fmax(value / max_abs, -1.0), 1.0);
    const sl_chart_rgb *side = t < 0.0 ? negative_stops : positive_stops;
    double a = fabs(t);
    if (a <= 0.5)
        return mix(centre_stop, side[0], a / 0.5);
    return mix(side[0], side[1], (a - 0.5) / 0.5);
}

void sl_chart_diverging_hex(char out[8], double value, double max_abs)
{
    sl_chart_rgb c = sl_chart_diverging_rgb(value, max_abs);
    snprintf(out, 8, "#%02x%02x%02x", c.r, c.g, c.b);
}

/* sRGB channel 0..255 to linear light, WCAG 2.x (threshold 0.04045). */
static double linear_channel(unsigned char c)
{
    double s = c / 255.0;
    return s <= 0.04045 ? s / 12.92 : pow((s + 0.055) / 1.055, 2.4);
}

double sl_chart_relative_luminance(sl_chart_rgb color)
{
    return 0.2126 * linear_channel(color.r) + 0.7152 * linear_channel(color.g)
           + 0.0722 * linear_channel(color.b);
}

/* Value label of the legend bar: few digits, no float noise. */
static void legend_value_label(char *out, size_t size, double value, double max_abs)
{
    sl_chart_ticks ticks = { .count = 0, .log10 = 0 };
    ticks.step = sl_chart_nice_step(max_abs, 4);
    ticks.decimals = sl_chart_step_decimals(ticks.step);
    ticks.values[0] = max_abs;
    ticks.count = 1;
    sl_chart_tick_label(out, size, value, &ticks);
}

sl_status sl_chart_color_legend(sl_chart_buf *buf, const sl_chart_rect *bar, double max_abs,
                                size_t steps, const char *title)
{
    if (!isfinite(max_abs))
        return SL_EINPUT;
    if (steps == 0)
        steps = 9;
    if (steps < 2)
        steps = 2;
    if (steps > 256) /* finer than a screen can show */
        steps = 256;
    double w = bar->width_px / (double)steps;
    sl_chart_buf_append(buf, "<g class=\"color-legend\">");
    sl_chart_text(buf, bar->x_px, bar->y_px - 4.0, SL_CHART_ANCHOR_START, "legend-title", title);
    for (size_t i = 0; i < steps; i++) {
        double value = -max_abs + ((double)i + 0.5) * (2.0 * max_abs / (double)steps);
        char hex[8];
        sl_chart_diverging_hex(hex, value, max_abs);
        sl_chart_buf_printf(buf, "<rect x=\"%s\" y=\"%s\" width=\"%s\" height=\"%s\" fill=\"%s\"/>",
                            sl__chart_px_text(bar->x_px + (double)i * w).s, sl__chart_px_text(bar->y_px).s,
                            sl__chart_px_text(w + 0.3).s, sl__chart_px_text(bar->height_px).s, hex);
    }
    double label_y = bar->y_px + bar->height_px + 11.0;
    const double at[3] = { -max_abs, 0.0, max_abs };
    const sl_chart_anchor anchors[3] = { SL_CHART_ANCHOR_START, SL_CHART_ANCHOR_MIDDLE,
                                         SL_CHART_ANCHOR_END };
    for (int i = 0; i < 3; i++) {
        char label[40];
        legend_value_label(label, sizeof label, at[i], max_abs);
        double x = bar->x_px + bar->width_px * (double)i / 2.0;
        sl_chart_text(buf, x, label_y, anchors[i], NULL, label);
    }
    return sl_chart_buf_append(buf, "</g>");
}
