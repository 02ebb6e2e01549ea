/* SPDX-License-Identifier: MIT
 * The lot report's tables: split summaries against prediction, device
 * parameters per split, level effects against the plan, and the
 * failure-analysis list. Units sit in the
 * column headings; every text cell is escaped.
 */
#include <math.h>
#include <stdio.h>

#include "report_internal.h"

static void table_open(sl_chart_buf *buf, const char *css_class, const char *const *headings,
                       size_t count)
{
    sl_chart_buf_printf(buf, "<table class=\"%s\"><thead><tr>", css_class);
    for (size_t i = 0; i < count; i++)
        sl_chart_buf_printf(buf, "<th>%s</th>", headings[i]); /* literal HTML below */
    sl_chart_buf_append(buf, "</tr></thead><tbody>\n");
}

static void table_close(sl_chart_buf *buf) { sl_chart_buf_append(buf, "</tbody></table>\n"); }

/* ---- split summaries ---- */

static const char *const split_headings[] = {
    "split", "devices", "usable", "predicted (V)", "&plusmn;&sigma; (V)",
    "mean of wafers (V)", "wafer SD (V)", "95&nbsp;% CI of wafers (V)", "bias (V)",
    "gate range (V)", "flagged",
};

static int split_mean_outside(const sl_analysis *a, size_t s)
{
    double mean = a->splits[s].cnp.mean;
    return isfinite(mean) && (mean < a->split_gate_min_V[s] || mean > a->split_gate_max_V[s]);
}

static void split_row(sl_chart_buf *buf, const sl_analysis *a, size_t s)
{
    const sl_analyze_split *sp = &a->splits[s];
    int outside = split_mean_outside(a, s);
    sl_chart_buf_printf(buf, "<tr%s>", outside ? " class=\"bad\"" : "");
    sl__report_cell_text(buf, a->plan->splits[s].name);
    sl__report_cell_long(buf, (long)sp->n_devices);
    sl__report_cell_long(buf, (long)sp->n_usable);
    sl__report_cell_fixed(buf, sp->cnp_predicted_V, 2);
    sl__report_cell_fixed(buf, sp->cnp_predicted_sigma_V, 2);
    sl__report_cell_fixed(buf, sp->cnp.mean, 2);
    sl__report_cell_fixed(buf, sp->cnp.sd, 2);
    if (sp->n_wafers >= 2)
        sl__report_cell_range(buf, sp->cnp.ci_low, sp->cnp.ci_high, 2, NULL);
    else if (sp->n_wafers == 1)
        sl__report_cell_text(buf, "one wafer: no interval");
    else
        sl__report_cell_range(buf, NAN, NAN, 2, NULL);
    sl__report_cell_fixed(buf, sp->bias_V, 2);
    sl__report_cell_range(buf, a->split_gate_min_V[s], a->split_gate_max_V[s], 1,
                         outside ? " (mean outside)" : NULL);
    sl__report_cell_long(buf, (long)sp->n_flagged);
    sl_chart_buf_append(buf, "</tr>\n");
}

void sl__report_splits_table(report_ctx *c, size_t dielectric)
{
    table_open(c->buf, "splits", split_headings, sizeof split_headings / sizeof *split_headings);
    for (size_t s = 0; s < c->a->n_splits; s++)
        if (c->a->plan->splits[s].dielectric == dielectric)
            split_row(c->buf, c->a, s);
    table_close(c->buf);
}

/* ---- density window and sweep coverage ---- */

static const char *const window_headings[] = {
    "split", "V<sub>cnp</sub> inside the sweep",
    "electrons at the top of the range, predicted (cm<sup>&minus;2</sup>)", "reached",
    "holes at the bottom, predicted (cm<sup>&minus;2</sup>)", "reached",
};

static void window_row(sl_chart_buf *buf, const sl_analysis *a, size_t s)
{
    const sl_analyze_split *sp = &a->splits[s];
    sl_chart_buf_append(buf, "<tr>");
    sl__report_cell_text(buf, a->plan->splits[s].name);
    if (isfinite(sp->inside_share))
        sl_chart_buf_printf(buf, "<td class=\"num\">%.1f&nbsp;%%</td>", 100.0 * sp->inside_share);
    else
        sl__report_cell_text(buf, "n/a");
    for (int k = 0; k < 2; k++) {
        sl__report_cell_density(buf, sp->window_predicted_per_cm2[k]);
        sl__report_cell_density(buf, sp->window_reached_per_cm2[k]);
    }
    sl_chart_buf_append(buf, "</tr>\n");
}

/* The density window the gate range reaches from the measured mean V_cnp
 * against the one predicted from the predicted V_cnp, and the share of
 * devices whose neutrality point stayed inside their sweep. */
void sl__report_window_table(report_ctx *c, size_t dielectric)
{
    table_open(c->buf, "window", window_headings, sizeof window_headings / sizeof *window_headings);
    for (size_t s = 0; s < c->a->n_splits; s++)
        if (c->a->plan->splits[s].dielectric == dielectric)
            window_row(c->buf, c->a, s);
    table_close(c->buf);
}

/* ---- device parameters per split ---- */

static const char *const parameter_headings[] = {
    "split", "mobility median (cm&sup2;/V&nbsp;s)", "spread (cm&sup2;/V&nbsp;s)",
    "planned mobility (cm&sup2;/V&nbsp;s)", "&plusmn;&sigma; (cm&sup2;/V&nbsp;s)",
    "mobility against plan", "n<sub>0</sub> median (cm<sup>&minus;2</sup>)",
    "spread (cm<sup>&minus;2</sup>)", "hysteresis median (V)", "spread (V)",
};

/* A number to four significant digits (mobility), "n/a" when non-finite. */
static void cell_general(sl_chart_buf *buf, double value)
{
    if (isfinite(value))
        sl_chart_buf_printf(buf, "<td class=\"num\">%.4g</td>", value);
    else
        sl_chart_buf_append(buf, "<td class=\"num\">n/a</td>");
}

/* The split's median mobility against its dielectric's planned one, in words. */
static const char *mobility_judgement(const sl_analyze_split *sp)
{
    if (sp->mobility_off_plan > 0)
        return "off plan";
    if (sp->mobility_off_plan == 0)
        return "as planned";
    return isfinite(sp->mobility_expected_cm2_per_Vs) ? "no mobility measured" : "no plan value";
}

static void parameter_row(sl_chart_buf *buf, const sl_analysis *a, size_t s)
{
    const sl_analyze_split *sp = &a->splits[s];
    sl_chart_buf_printf(buf, "<tr%s data-split=\"", sp->mobility_off_plan > 0 ? " class=\"bad\"" : "");
    sl_chart_buf_escape(buf, a->plan->splits[s].name);
    sl_chart_buf_printf(buf, "\" data-mobility-off-plan=\"%d\">", sp->mobility_off_plan);
    sl__report_cell_text(buf, a->plan->splits[s].name);
    cell_general(buf, sp->mobility_median_cm2_per_Vs);
    cell_general(buf, sp->mobility_spread_cm2_per_Vs);
    cell_general(buf, sp->mobility_expected_cm2_per_Vs);
    cell_general(buf, sp->mobility_expected_sigma_cm2_per_Vs);
    sl__report_cell_text(buf, mobility_judgement(sp));
    sl__report_cell_density(buf, sp->n0_median_per_cm2);
    sl__report_cell_density(buf, sp->n0_spread_per_cm2);
    sl__report_cell_fixed(buf, sp->hysteresis_median_V, 3);
    sl__report_cell_fixed(buf, sp->hysteresis_spread_V, 3);
    sl_chart_buf_append(buf, "</tr>\n");
}

/* Per split, the median and spread (1.4826 MAD) of mobility, n0 and
 * hysteresis over its usable devices, and the median mobility against the
 * plan's expected one of its dielectric. */
void sl__report_parameters_table(report_ctx *c)
{
    table_open(c->buf, "parameters", parameter_headings,
               sizeof parameter_headings / sizeof *parameter_headings);
    for (size_t s = 0; s < c->a->n_splits; s++)
        parameter_row(c->buf, c->a, s);
    table_close(c->buf);
}

/* ---- effects ---- */

static const char *const effect_headings[] = {
    "factor", "level", "versus", "planned (cm<sup>&minus;2</sup>)",
    "&plusmn;&sigma; (cm<sup>&minus;2</sup>)", "tolerance (cm<sup>&minus;2</sup>)",
    "estimated (cm<sup>&minus;2</sup>)", "SE (cm<sup>&minus;2</sup>)", "df",
    "95&nbsp;% CI (cm<sup>&minus;2</sup>)", "wafers", "verdict",
};

/* A 95 % interval of densities as "lo .. hi" in the report's density style. */
static void cell_density_range(sl_chart_buf *buf, double lo, double hi)
{
    char text[64] = "";
    if (isfinite(lo) && isfinite(hi))
        snprintf(text, sizeof text, "%.3g .. %.3g", lo, hi);
    sl__report_cell_text(buf, text);
}

static void effect_row(sl_chart_buf *buf, const sl_analyze_effect *e)
{
    sl_chart_buf_printf(buf, "<tr%s>", e->off_plan ? " class=\"bad\"" : "");
    sl__report_cell_text(buf, e->factor);
    sl__report_cell_text(buf, e->level);
    sl__report_cell_text(buf, e->is_intercept ? "-" : e->reference);
    sl__report_cell_density(buf, e->planned_per_cm2);
    sl__report_cell_density(buf, e->planned_sigma_per_cm2);
    sl__report_cell_density(buf, e->tolerance_per_cm2);
    sl__report_cell_density(buf, e->estimated_per_cm2);
    sl__report_cell_density(buf, e->stderr_per_cm2);
    if (isfinite(e->estimated_per_cm2))
        sl__report_cell_long(buf, (long)e->df);
    else
        sl__report_cell_text(buf, "");
    cell_density_range(buf, e->ci_low_per_cm2, e->ci_high_per_cm2);
    sl__report_cell_long(buf, (long)e->n_wafers);
    sl__report_cell_text(buf, sl_stats_verdict_name(e->verdict));
    sl_chart_buf_append(buf, "</tr>\n");
}

void sl__report_effects_table(report_ctx *c)
{
    table_open(c->buf, "effects", effect_headings, sizeof effect_headings / sizeof *effect_headings);
    for (size_t i = 0; i < c->a->n_effects; i++)
        effect_row(c->buf, &c->a->effects[i]);
    table_close(c->buf);
}

/* ---- failure analysis ---- */

static const char *const failure_headings[] = {
    "rank", "wafer", "device", "die x", "die y", "split", "reason",
};

static void failure_row(sl_chart_buf *buf, const sl_analysis *a, const sl_analyze_device *d,
                        size_t rank)
{
    sl_chart_buf_append(buf, "<tr class=\"fa\">");
    sl__report_cell_long(buf, (long)rank + 1);
    sl__report_cell_text(buf, d->wafer);
    sl__report_cell_text(buf, d->device);
    sl__report_cell_long(buf, d->die_x);
    sl__report_cell_long(buf, d->die_y);
    sl__report_cell_text(buf, a->plan->splits[d->split].name);
    sl__report_cell_text(buf, d->reason);
    sl_chart_buf_append(buf, "</tr>\n");
}

/* The most severe SL_REPORT_FAILURE_ROWS_MAX flagged devices; the page
 * says how many more there are and where to find them all. */
sl_status sl__report_failure_table(report_ctx *c)
{
    if (c->a->n_flagged == 0) {
        sl__report_note(c->buf, "No device is flagged: nothing to send to failure analysis.");
        return c->buf->status;
    }
    table_open(c->buf, "failures", failure_headings,
               sizeof failure_headings / sizeof *failure_headings);
    const sl_analyze_device *d;
    size_t rank = 0;
    sl_status st = SL_OK;
    while (rank < SL_REPORT_FAILURE_ROWS_MAX && (st = sl__report_next_flagged(c, &d)) == SL_OK && d)
        failure_row(c->buf, c->a, d, rank++);
    sl__report_rewind(c);
    table_close(c->buf);
    rank = c->a->n_flagged;
    if (st == SL_OK && rank > SL_REPORT_FAILURE_ROWS_MAX)
        sl_chart_buf_printf(c->buf, "<p class=\"note\">The %d most severe of %zu flagged "
                            "devices; <code>splitlot compare --lot ",
                            SL_REPORT_FAILURE_ROWS_MAX, rank);
    if (st == SL_OK && rank > SL_REPORT_FAILURE_ROWS_MAX) {
        sl_chart_buf_escape(c->buf, c->a->lot.lot);
        sl_chart_buf_append(c->buf, " --format csv</code> lists them all.</p>\n");
    }
    return st == SL_OK ? c->buf->status : st;
}
