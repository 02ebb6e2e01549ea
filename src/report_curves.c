/* SPDX-License-Identifier: MIT
 * Transfer curves of the lot report: for the most severe flagged devices with
 * a stored sweep, the measured points and, where the fit succeeded, the model
 * curve from the stored parameters. Log resistance for opens and shorts.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "report_internal.h"
#include "splitlot/fit.h"

#define CURVE_WIDTH_PX 380.0
#define CURVE_HEIGHT_PX 250.0
#define CURVE_MODEL_POINTS 160
#define LOG_Y_RATIO 50.0 /* max/min resistance above which a linear axis hides the floor */

typedef struct {
    double *vg_V, *r_ohm;
    size_t n;
    double model_vg_V[CURVE_MODEL_POINTS], model_r_ohm[CURVE_MODEL_POINTS];
    size_t n_model;
} curve_data;

static int has_fit(const sl_analyze_device *d)
{
    return strcmp(d->fit_class, "ok") == 0 && isfinite(d->cnp_measured_V)
           && isfinite(d->mobility_cm2_per_Vs) && isfinite(d->n0_per_cm2)
           && isfinite(d->r_contact_ohm);
}

/* "symmetric/qc": fitted with the charge balance; no suffix: short form. */
static int uses_charge_balance(const sl_analyze_device *d)
{
    size_t n = d->fit_model ? strlen(d->fit_model) : 0;
    return n >= 3 && strcmp(d->fit_model + n - 3, "/qc") == 0;
}

/* "two-mobility" (with or without "/qc") and both mobilities stored. */
static int uses_two_mobilities(const sl_analyze_device *d)
{
    return d->fit_model && strncmp(d->fit_model, "two-mobility", 12) == 0
           && isfinite(d->electron_mobility_cm2_per_Vs) && isfinite(d->hole_mobility_cm2_per_Vs)
           && d->electron_mobility_cm2_per_Vs > 0.0 && d->hole_mobility_cm2_per_Vs > 0.0;
}

static void model_curve(curve_data *cd, const sl_analysis *a, const sl_analyze_device *d)
{
    cd->n_model = 0;
    if (!has_fit(d) || cd->n == 0)
        return;
    double lo = cd->vg_V[0], hi = cd->vg_V[0];
    for (size_t i = 1; i < cd->n; i++) {
        lo = fmin(lo, cd->vg_V[i]);
        hi = fmax(hi, cd->vg_V[i]);
    }
    sl_fit_config cfg;
    /* the device's own channel (its type or its row), as it was fitted */
    sl_fit_config_default(&cfg, a->split_capacitance_F_per_m2[d->split],
                          d->channel_length_um, d->channel_width_um);
    sl_fit_params p = { d->cnp_measured_V, d->mobility_cm2_per_Vs, d->n0_per_cm2, d->r_contact_ohm };
    /* the density model the device was fitted with, as stored */
    sl_physics_density_table *table = NULL;
    if (uses_charge_balance(d)) {
        double t = isfinite(a->temperature_K)      ? a->temperature_K /* the view's */
                   : a->plan->n_temperatures > 0 ? a->plan->temperatures_K[0]
                                                 : 300.0;
        double reach = 2.0 * (fabs(lo) + fabs(hi) + fabs(p.cnp_V)) + 1.0;
        if (sl_physics_density_table_new(&table, cfg.gate_capacitance_F_per_m2, t,
                                         a->plan->fermi_velocity_m_s, reach) != SL_OK)
            return; /* no curve rather than the wrong one */
        cfg.density_table = table;
    }
    /* a two-mobility fit is drawn with its own electron/hole ratio */
    double ratio = uses_two_mobilities(d) ? d->electron_mobility_cm2_per_Vs / d->hole_mobility_cm2_per_Vs
                                          : 1.0;
    for (size_t i = 0; i < CURVE_MODEL_POINTS; i++) {
        double vg = lo + (hi - lo) * (double)i / (CURVE_MODEL_POINTS - 1);
        cd->model_vg_V[i] = vg;
        cd->model_r_ohm[i] = ratio != 1.0 ? sl_fit_model_two_mobility_ohm(&p, ratio, &cfg, vg)
                                          : sl_fit_model_ohm(&p, &cfg, vg);
    }
    sl_physics_density_table_free(table);
    cd->n_model = CURVE_MODEL_POINTS;
}

static int wants_log_y(const curve_data *cd, const sl_analyze_device *d)
{
    if (strcmp(d->fit_class, "short") == 0 || strcmp(d->fit_class, "open") == 0)
        return 1;
    double lo = INFINITY, hi = 0.0;
    for (size_t i = 0; i < cd->n; i++)
        if (isfinite(cd->r_ohm[i]) && cd->r_ohm[i] > 0.0) {
            lo = fmin(lo, cd->r_ohm[i]);
            hi = fmax(hi, cd->r_ohm[i]);
        }
    return isfinite(lo) && hi / lo > LOG_Y_RATIO;
}

static void curve_chart(report_ctx *c, const curve_data *cd, const sl_analyze_device *d)
{
    char title[200];
    snprintf(title, sizeof title, "%s %s (%s)", d->wafer, d->device,
             c->a->plan->splits[d->split].name);
    /* A legend only when there are two series to tell apart. */
    sl_chart_series series[2] = {
        { cd->n_model ? "measured" : NULL, cd->vg_V, cd->r_ohm, cd->n, 1, 0 },
        { "fitted model", cd->model_vg_V, cd->model_r_ohm, cd->n_model, 0, 1 },
    };
    sl_chart_frame frame;
    sl_chart_frame_default(&frame, CURVE_WIDTH_PX, CURVE_HEIGHT_PX, title);
    frame.embed_style = 0;
    sl_chart_buf_append(c->buf, "<figure class=\"curve\">");
    sl_chart_xy(c->buf, &frame, series, cd->n_model ? 2 : 1, "gate voltage (V)",
                "resistance (\xce\xa9)", wants_log_y(cd, d));
    sl_chart_buf_append(c->buf, "<figcaption>");
    sl_chart_buf_escape(c->buf, d->reason);
    if (!cd->n_model)
        sl_chart_buf_append(c->buf, " (no fitted curve)");
    sl_chart_buf_append(c->buf, "</figcaption></figure>\n");
    c->sum->n_curves++;
}

/* Draw one device's curve; SL_OK also when it has no sweep to draw. */
static sl_status device_curve(report_ctx *c, const sl_analyze_device *d)
{
    curve_data cd = { 0 };
    sl_status st = sl_store_load_sweep(c->store, &cd.vg_V, &cd.r_ohm, &cd.n, d->device_id, c->diag);
    if (st == SL_OK && cd.n > 0) {
        model_curve(&cd, c->a, d);
        curve_chart(c, &cd, d);
    }
    free(cd.vg_V);
    free(cd.r_ohm);
    return st;
}

/* One reading of the flagged devices with a stored sweep (results rows
 * have none: n_points 0), most severe first, drawing those with a fitted
 * curve (fitted nonzero) or those without. */
static sl_status draw_pass(report_ctx *c, int fitted)
{
    sl_status st = SL_OK;
    const sl_analyze_device *d;
    while (c->sum->n_curves < c->opts->max_curves &&
           (st = sl__report_next_flagged(c, &d)) == SL_OK && d)
        if (d->n_points > 0 && has_fit(d) == fitted)
            st = device_curve(c, d);
    sl__report_rewind(c);
    return st;
}

/* The flagged devices whose curve was fitted (outliers, off-prediction:
 * the curve shows why) first, then shorts, opens and failed fits, whose
 * severity ranks them first in the failure-analysis list. */
static sl_status draw_curves(report_ctx *c)
{
    sl_status st = draw_pass(c, 1);
    return st == SL_OK ? draw_pass(c, 0) : st;
}

sl_status sl__report_section_curves(report_ctx *c)
{
    if (c->a->n_flagged == 0 || c->opts->max_curves == 0)
        return SL_OK;
    c->has_curves = 1;
    sl__report_section_open(c->buf, "curves", "Transfer curves of flagged devices");
    sl_chart_buf_printf(c->buf,
                        "<p>Resistance against gate voltage of up to %zu flagged devices with a "
                        "stored sweep, those with a fitted curve (outliers, off the prediction) "
                        "first, each group most severe first: measured points, and the fitted model "
                        "where the extraction succeeded. Opens and shorts on a logarithmic "
                        "resistance axis.</p>\n<div class=\"curves\">\n",
                        c->opts->max_curves);
    sl_status st = draw_curves(c);
    if (st == SL_OK && c->sum->n_curves == 0)
        sl__report_note(c->buf, "None of the flagged devices has a stored sweep.");
    sl_chart_buf_append(c->buf, "</div>\n");
    sl__report_section_close(c->buf);
    return st == SL_OK ? c->buf->status : st;
}
