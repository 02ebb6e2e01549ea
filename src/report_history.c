/* SPDX-License-Identifier: MIT
 * History section of the lot report: every level's estimate across the lots
 * of the store on an individuals control chart with its limits, and the
 * pooled values. Drawn only when more than one lot has estimates.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "report_internal.h"

#define HISTORY_WIDTH_PX 460.0
#define HISTORY_HEIGHT_PX 260.0

static int chartable(const sl_history_level *l)
{
    return l->n_points >= 2 && isfinite(l->chart.center) && isfinite(l->chart.lcl)
           && isfinite(l->chart.ucl) && l->chart.lcl <= l->chart.ucl;
}

static void level_chart(report_ctx *c, const sl_history_level *l)
{
    double *values = malloc(l->n_points * sizeof *values);
    const char **labels = malloc(l->n_points * sizeof *labels);
    if (!values || !labels) {
        free(values);
        free(labels);
        c->buf->status = SL_ENOMEM;
        return;
    }
    for (size_t i = 0; i < l->n_points; i++) {
        values[i] = l->points[i].estimated_per_cm2;
        labels[i] = l->points[i].lot;
    }
    char title[200];
    snprintf(title, sizeof title, "%s: %s", l->factor, l->level);
    sl_chart_frame frame;
    sl_chart_frame_default(&frame, HISTORY_WIDTH_PX, HISTORY_HEIGHT_PX, title);
    frame.embed_style = 0;
    frame.margin_left_px = 80.0;  /* tick labels like "-1.5e12" beside the axis title */
    frame.margin_right_px = 40.0; /* limit labels like "upper -1.805e+12" */
    if (l->n_points > 6)
        frame.margin_bottom_px = 64.0; /* lot names may slant */
    sl_chart_buf_append(c->buf, "<figure class=\"history\">");
    sl_chart_control_planned(c->buf, &frame, values, labels, l->n_points, l->chart.center,
                             l->chart.lcl, l->chart.ucl, l->planned_per_cm2, "lot",
                             "doping (cm\xe2\x81\xbb\xc2\xb2)");
    sl_chart_buf_printf(c->buf, "<figcaption>%zu lots, %zu outside the limits; planned "
                        "%.3g cm<sup>&minus;2</sup>, pooled %.3g, between-lot &sigma; %.2g"
                        "</figcaption></figure>\n", l->n_points, l->n_drift, l->planned_per_cm2,
                        l->pooled.value, l->pooled.tau);
    c->sum->n_history_levels++;
    free(values);
    free(labels);
}

static const char pooled_headings[] =
    "<table class=\"history\"><thead><tr><th>factor</th><th>level</th><th>lots</th>"
    "<th>planned (cm<sup>&minus;2</sup>)</th><th>pooled (cm<sup>&minus;2</sup>)</th>"
    "<th>SE (cm<sup>&minus;2</sup>)</th><th>between-lot &sigma; (cm<sup>&minus;2</sup>)</th>"
    "<th>drifting lots</th></tr></thead><tbody>\n";

static void pooled_table(report_ctx *c, const sl_history *h)
{
    sl_chart_buf_append(c->buf, pooled_headings);
    for (size_t i = 0; i < h->n_levels; i++) {
        const sl_history_level *l = &h->levels[i];
        sl_chart_buf_append(c->buf, "<tr>");
        sl__report_cell_text(c->buf, l->factor);
        sl__report_cell_text(c->buf, l->level);
        sl__report_cell_long(c->buf, (long)l->n_points);
        sl__report_cell_density(c->buf, l->planned_per_cm2);
        sl__report_cell_density(c->buf, l->pooled.value);
        sl__report_cell_density(c->buf, l->pooled.se);
        sl__report_cell_density(c->buf, l->pooled.tau);
        sl__report_cell_long(c->buf, (long)l->n_drift);
        sl_chart_buf_append(c->buf, "</tr>\n");
    }
    sl_chart_buf_append(c->buf, "</tbody></table>\n");
}

static void history_body(report_ctx *c, const sl_history *h)
{
    c->has_history = 1;
    sl__report_section_open(c->buf, "history", "History across lots");
    sl_chart_buf_printf(c->buf,
                        "<p>Each level's estimated doping in the %zu lots of the database with "
                        "estimates, in creation order, on an individuals chart: centre line "
                        "at the random-effects pooled value (DerSimonian and Laird) and limits "
                        "at &plusmn;3&nbsp;&radic;(&tau;&sup2; + SE&sup2;), &tau; the "
                        "between-lot &sigma;, for a lot of the median SE. Diamonds: lots "
                        "outside the limits of the lots before them (each judged with its own "
                        "SE, from the second lot on).</p>\n"
                        "<div class=\"charts\">\n", h->n_lots);
    for (size_t i = 0; i < h->n_levels; i++)
        if (chartable(&h->levels[i]))
            level_chart(c, &h->levels[i]);
    sl_chart_buf_append(c->buf, "</div>\n");
    pooled_table(c, h);
    sl__report_section_close(c->buf);
}

sl_status sl__report_load_history(sl_history **out, sl_store *store, sl_diag *diag)
{
    *out = NULL;
    char **names = NULL;
    size_t n_lots = 0;
    sl_status st = sl_store_list_lots(store, &names, &n_lots, diag);
    sl_store_free_names(names, n_lots);
    if (st != SL_OK || n_lots < 2)
        return st;
    return sl_analyze_history(out, store, diag);
}

/* The history re-analyses every lot (skipped outright for a single-lot
 * store), unless it was loaded before the lot's stream was opened. */
sl_status sl__report_section_history(report_ctx *c)
{
    sl_history *own = NULL;
    const sl_history *h = c->history;
    sl_status st = SL_OK;
    if (!c->history_loaded) {
        st = sl__report_load_history(&own, c->store, c->diag);
        h = own;
    }
    if (st == SL_OK && h && h->n_lots > 1)
        history_body(c, h);
    sl_history_free(own);
    return st == SL_OK ? c->buf->status : st;
}
