/* SPDX-License-Identifier: MIT
 * Transfer-curve fitter (see include/splitlot/fit.h). In gate-voltage units
 * the model is R = R_c + K / sqrt(d^2 + (V - V0)^2) with d = n0 e / C_g and
 * K = (L/W) / (C_g mu); R_c and K enter linearly and are projected out.
 */
#include "splitlot/fit.h"

#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_movstat.h>
#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#include "splitlot/units.h"

#define SMOOTH_WINDOW 5        /* moving-median window for the starting peak */
#define N_NONLINEAR 2          /* V0 and b = ln d */
#define N_ALL 4                /* V0, d, K, R_c */
/* |Spearman rho| from which a curve peaking at an end counts as monotonic
 * (common practice: a clear trend, not a chance ordering of noise). */
#define MONOTONIC_MIN_RANK_CORRELATION 0.8
#define XTOL 1e-6
#define GTOL 1e-12
#define FTOL 0.0

struct sl_fit_workspace {
    size_t max_points, n;
    double *vg, *r, *u, *g, *smooth, *col, *jac4, *rank_work;
    gsl_movstat_workspace *movstat;
    gsl_multifit_nlinear_workspace *nl, *nl_full;
    size_t nl_points, nl_full_points;
    gsl_matrix *cov4;
    /* Projection state at the last evaluated (V0, b). */
    bool fix_rc_zero;
    double at_v0, at_b, rc, k, chisq;
    double saa, sac, scc, det;   /* Gram matrix of the linear columns */
    bool have_state;
};

static const char *const class_names[SL_FIT_CLASS_COUNT] = {
    "ok", "short", "open", "cnp-outside-sweep", "no-convergence", "poor-fit",
};

const char *sl_fit_class_name(sl_fit_class cls)
{
    return (unsigned)cls < SL_FIT_CLASS_COUNT ? class_names[cls] : "?";
}

sl_status sl_fit_class_parse(sl_fit_class *out, const char *name)
{
    for (int i = 0; i < SL_FIT_CLASS_COUNT; i++) {
        if (strcmp(name, class_names[i]) == 0) {
            *out = (sl_fit_class)i;
            return SL_OK;
        }
    }
    return SL_EINPUT;
}

void sl_fit_config_default(sl_fit_config *cfg, double gate_capacitance_F_per_m2,
                           double channel_length_um, double channel_width_um)
{
    cfg->gate_capacitance_F_per_m2 = gate_capacitance_F_per_m2;
    cfg->length_over_width = channel_length_um / channel_width_um;
    cfg->short_max_ohm = 50.0;        /* common practice */
    cfg->short_flat_max_ohm = 500.0;  /* common practice */
    cfg->open_min_ohm = 1e9;          /* common practice: source-meter overload */
    cfg->min_modulation = 0.05;       /* common practice */
    cfg->poor_max_rel_rms = 0.05;     /* common practice */
    cfg->poor_min_r_squared = 0.9;    /* common practice */
    cfg->max_iterations = 100;
    cfg->method = SL_FIT_METHOD_PROJECTED;
}

double sl_fit_model_ohm(const sl_fit_params *p, const sl_fit_config *cfg, double vg_V)
{
    double n0_per_m2 = p->n0_per_cm2 * SL_PER_M2_PER_PER_CM2;
    double ng_per_m2 = cfg->gate_capacitance_F_per_m2 * (vg_V - p->cnp_V) / SL_SI_ELEMENTARY_CHARGE;
    double mobility_m2_per_Vs = p->mobility_cm2_per_Vs * SL_M2_PER_CM2;
    double density = hypot(n0_per_m2, ng_per_m2);
    return p->r_contact_ohm +
           cfg->length_over_width / (SL_SI_ELEMENTARY_CHARGE * mobility_m2_per_Vs * density);
}

/* ---- workspace ---- */

sl_fit_workspace *sl_fit_workspace_new(size_t max_points)
{
    if (max_points < SL_FIT_MIN_POINTS)
        return NULL;
    sl_fit_workspace *ws = calloc(1, sizeof *ws);
    if (!ws)
        return NULL;
    ws->max_points = max_points;
    double **arrays[] = { &ws->vg, &ws->r, &ws->u, &ws->g, &ws->smooth, &ws->col };
    bool ok = true;
    for (size_t i = 0; i < sizeof arrays / sizeof arrays[0]; i++)
        ok = ok && (*arrays[i] = malloc(max_points * sizeof(double))) != NULL;
    ws->jac4 = ok ? malloc(max_points * N_ALL * sizeof(double)) : NULL;
    ws->rank_work = ok ? malloc(2 * max_points * sizeof(double)) : NULL;
    ws->movstat = gsl_movstat_alloc(SMOOTH_WINDOW);
    ws->cov4 = gsl_matrix_alloc(N_ALL, N_ALL);
    if (!ok || !ws->jac4 || !ws->rank_work || !ws->movstat || !ws->cov4) {
        sl_fit_workspace_free(ws);
        return NULL;
    }
    return ws;
}

void sl_fit_workspace_free(sl_fit_workspace *ws)
{
    if (!ws)
        return;
    free(ws->vg);
    free(ws->r);
    free(ws->u);
    free(ws->g);
    free(ws->smooth);
    free(ws->col);
    free(ws->jac4);
    free(ws->rank_work);
    if (ws->movstat)
        gsl_movstat_free(ws->movstat);
    if (ws->nl)
        gsl_multifit_nlinear_free(ws->nl);
    if (ws->nl_full)
        gsl_multifit_nlinear_free(ws->nl_full);
    if (ws->cov4)
        gsl_matrix_free(ws->cov4);
    free(ws);
}

/* A GSL solver is sized for one sweep length; keep it while lengths repeat.
 * Levenberg-Marquardt: a step is a small p x p solve (normal equations by
 * Cholesky, fine at p <= 4 with well-scaled parameters), and its damping
 * copes with the flat direction of d when the peak is sharp. */
static gsl_multifit_nlinear_workspace *solver_for(gsl_multifit_nlinear_workspace **slot,
                                                  size_t *slot_points, size_t n, size_t p)
{
    if (*slot && *slot_points == n)
        return *slot;
    if (*slot)
        gsl_multifit_nlinear_free(*slot);
    gsl_multifit_nlinear_parameters par = gsl_multifit_nlinear_default_parameters();
    par.trs = gsl_multifit_nlinear_trs_lm;
    par.solver = gsl_multifit_nlinear_solver_cholesky;
    par.scale = gsl_multifit_nlinear_scale_levenberg;
    *slot = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &par, n, p);
    *slot_points = *slot ? n : 0;
    return *slot;
}

static sl_status ensure_solvers(sl_fit_workspace *ws, size_t n)
{
    bool ok = solver_for(&ws->nl, &ws->nl_points, n, N_NONLINEAR) &&
              solver_for(&ws->nl_full, &ws->nl_full_points, n, N_ALL);
    return ok ? SL_OK : SL_ENOMEM;
}

/* ---- variable projection ---- */

/* With u = 1/R the relative residual is f = 1 - R_c u - K g u: a linear least
 * squares problem in (R_c, K) with columns a = u, c = g u and target 1. The
 * 2x2 Gram matrix is formed once per (V0, d) and serves the solve for (R_c, K)
 * and both Kaufman projections, which is why it is not left to gsl_fit_wlinear
 * (two passes and a division per point, three times per step). */
static void gram_solve(const sl_fit_workspace *ws, double rhs_a, double rhs_c, double *x_a,
                       double *x_c)
{
    if (ws->fix_rc_zero) {
        *x_a = 0.0;
        *x_c = rhs_c / ws->scc;
        return;
    }
    *x_a = (ws->scc * rhs_a - ws->sac * rhs_c) / ws->det;
    *x_c = (ws->saa * rhs_c - ws->sac * rhs_a) / ws->det;
}

static void project(sl_fit_workspace *ws, double v0, double b)
{
    if (ws->have_state && ws->at_v0 == v0 && ws->at_b == b)
        return;
    double d2 = exp(2.0 * b), sac = 0.0, scc = 0.0, sa1 = 0.0, sc1 = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double x = ws->vg[i] - v0, g = 1.0 / sqrt(d2 + x * x), u = ws->u[i];
        double c = g * u;
        ws->g[i] = g;
        sac += u * c;
        scc += c * c;
        sa1 += u;
        sc1 += c;
    }
    ws->sac = sac;
    ws->scc = scc;
    ws->det = ws->saa * scc - sac * sac;
    gram_solve(ws, sa1, sc1, &ws->rc, &ws->k);
    double chisq = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double f = 1.0 - (ws->rc + ws->k * ws->g[i]) * ws->u[i];
        chisq += f * f;
    }
    ws->chisq = chisq;
    ws->at_v0 = v0;
    ws->at_b = b;
    ws->have_state = true;
}

static int projected_residual(const gsl_vector *x, void *data, gsl_vector *f)
{
    sl_fit_workspace *ws = data;
    project(ws, gsl_vector_get(x, 0), gsl_vector_get(x, 1));
    for (size_t i = 0; i < ws->n; i++)
        f->data[i * f->stride] = 1.0 - (ws->rc + ws->k * ws->g[i]) * ws->u[i];
    return GSL_SUCCESS;
}

/* Kaufman's approximation of the projected Jacobian: column j is
 * -P_perp (u dg/dtheta_j K), P_perp the projector off span{a, c}. */
static int projected_jacobian(const gsl_vector *x, void *data, gsl_matrix *jac)
{
    sl_fit_workspace *ws = data;
    double v0 = gsl_vector_get(x, 0), d2 = exp(2.0 * gsl_vector_get(x, 1));
    project(ws, v0, gsl_vector_get(x, 1));
    double ta[N_NONLINEAR] = { 0.0, 0.0 }, tc[N_NONLINEAR] = { 0.0, 0.0 };
    for (size_t i = 0; i < ws->n; i++) {
        double g = ws->g[i], u = ws->u[i], kg3u = ws->k * g * g * g * u;
        double t0 = (ws->vg[i] - v0) * kg3u, t1 = -d2 * kg3u;
        double *row = jac->data + i * jac->tda;
        row[0] = t0;
        row[1] = t1;
        ta[0] += u * t0;
        ta[1] += u * t1;
        tc[0] += g * u * t0;
        tc[1] += g * u * t1;
    }
    double alpha[N_NONLINEAR], beta[N_NONLINEAR];
    for (size_t j = 0; j < N_NONLINEAR; j++)
        gram_solve(ws, ta[j], tc[j], &alpha[j], &beta[j]);
    for (size_t i = 0; i < ws->n; i++) {
        double u = ws->u[i], gu = ws->g[i] * u;
        double *row = jac->data + i * jac->tda;
        for (size_t j = 0; j < N_NONLINEAR; j++)
            row[j] = -(row[j] - alpha[j] * u - beta[j] * gu);
    }
    return GSL_SUCCESS;
}

/* Run GSL's trust-region driver from start; the solution is left in start.
 * No progress means no step can lower the cost any more: a minimum. */
static int run_driver(gsl_multifit_nlinear_workspace *nl, gsl_multifit_nlinear_fdf *fdf,
                      double *start, const sl_fit_config *cfg, int *iterations)
{
    gsl_vector_view x0 = gsl_vector_view_array(start, fdf->p);
    int info = 0, st = gsl_multifit_nlinear_init(&x0.vector, fdf, nl);
    if (st == GSL_SUCCESS)
        st = gsl_multifit_nlinear_driver((size_t)cfg->max_iterations, XTOL, GTOL, FTOL, NULL,
                                         NULL, &info, nl);
    *iterations += (int)gsl_multifit_nlinear_niter(nl);
    gsl_vector_memcpy(&x0.vector, gsl_multifit_nlinear_position(nl));
    return st == GSL_ENOPROG ? GSL_SUCCESS : st;
}

/* Projected search from (v0, b); leaves the solution in the projection state. */
static int run_search(sl_fit_workspace *ws, const sl_fit_config *cfg, double *v0, double *b,
                      int *iterations)
{
    gsl_multifit_nlinear_fdf fdf = {
        .f = projected_residual, .df = projected_jacobian, .fvv = NULL,
        .n = ws->n, .p = N_NONLINEAR, .params = ws,
    };
    double x[N_NONLINEAR] = { *v0, *b };
    ws->have_state = false;
    int st = run_driver(ws->nl, &fdf, x, cfg, iterations);
    *v0 = x[0];
    *b = x[1];
    ws->have_state = false;
    project(ws, *v0, *b);
    return st;
}

/* ---- full search over all four parameters ---- */

/* x = (V0, b, c, rho) with d = e^b, K = e^c and R_c = rho^2, so that K > 0
 * and R_c >= 0 hold without bounds. Fills ws->g on the way. */
typedef struct {
    double v0, d2, k, rho;
} full_point;

static full_point unpack_full(const gsl_vector *x)
{
    full_point p = { gsl_vector_get(x, 0), exp(2.0 * gsl_vector_get(x, 1)),
                     exp(gsl_vector_get(x, 2)), gsl_vector_get(x, 3) };
    return p;
}

static int full_residual(const gsl_vector *x, void *data, gsl_vector *f)
{
    sl_fit_workspace *ws = data;
    full_point p = unpack_full(x);
    for (size_t i = 0; i < ws->n; i++) {
        double dx = ws->vg[i] - p.v0, g = 1.0 / sqrt(p.d2 + dx * dx);
        ws->g[i] = g;
        f->data[i * f->stride] = 1.0 - (p.rho * p.rho + p.k * g) * ws->u[i];
    }
    return GSL_SUCCESS;
}

static int full_jacobian(const gsl_vector *x, void *data, gsl_matrix *jac)
{
    sl_fit_workspace *ws = data;
    full_point p = unpack_full(x);
    for (size_t i = 0; i < ws->n; i++) {
        double dx = ws->vg[i] - p.v0, g = 1.0 / sqrt(p.d2 + dx * dx), u = ws->u[i];
        double kg3u = p.k * g * g * g * u;
        double *row = jac->data + i * jac->tda;
        row[0] = -dx * kg3u;
        row[1] = p.d2 * kg3u;
        row[2] = -p.k * g * u;
        row[3] = -2.0 * p.rho * u;
    }
    return GSL_SUCCESS;
}

/* Full search from (v0, b) with the linear solution there as the start
 * (K > 0 and R_c > 0 forced, as logarithm and square root need them). */
static int run_full_search(sl_fit_workspace *ws, const sl_fit_config *cfg, double *v0,
                           double *b, int *iterations)
{
    ws->fix_rc_zero = false;
    ws->have_state = false;
    project(ws, *v0, *b);
    double r_min = gsl_stats_min(ws->r, 1, ws->n);
    double k0 = ws->k > 0.0 ? ws->k : (gsl_stats_max(ws->r, 1, ws->n) - r_min) * exp(*b);
    double rc0 = GSL_MAX(ws->rc, 0.01 * r_min);
    double x[N_ALL] = { *v0, *b, log(k0), sqrt(rc0) };
    gsl_multifit_nlinear_fdf fdf = {
        .f = full_residual, .df = full_jacobian, .fvv = NULL,
        .n = ws->n, .p = N_ALL, .params = ws,
    };
    int st = run_driver(ws->nl_full, &fdf, x, cfg, iterations);
    *v0 = x[0];
    *b = x[1];
    ws->k = exp(x[2]);
    ws->rc = x[3] * x[3];
    gsl_vector_view xv = gsl_vector_view_array(x, N_ALL);
    gsl_vector *f = gsl_multifit_nlinear_residual(ws->nl_full);
    full_residual(&xv.vector, ws, f);   /* ws->g at the solution */
    gsl_blas_ddot(f, f, &ws->chisq);
    ws->have_state = false;
    return st;
}

/* ---- starting values ---- */

/* Half width of the peak of curve (smoothed or raw readings) at half height
 * over its smallest value, from the side where it is reached nearest; the
 * sweep span when neither. */
static double peak_half_width_V(const sl_fit_workspace *ws, const double *curve, size_t peak)
{
    double floor_ohm = gsl_stats_min(curve, 1, ws->n);
    double half = floor_ohm + 0.5 * (curve[peak] - floor_ohm);
    double best = ws->vg[ws->n - 1] - ws->vg[0];
    size_t i = peak;
    while (i > 0 && curve[i - 1] > half)
        i--;
    if (i > 0)
        best = fmin(best, ws->vg[peak] - ws->vg[i - 1]);
    for (i = peak; i + 1 < ws->n && curve[i + 1] > half;)
        i++;
    if (i + 1 < ws->n)
        best = fmin(best, ws->vg[i + 1] - ws->vg[peak]);
    return best;
}

/* ln d to start from at the peak: half height is reached at |V - V0| =
 * sqrt(3) d; the best of a few multiples of that guess by projected cost,
 * which goes to *cost. */
static double start_log_width(sl_fit_workspace *ws, const double *curve, size_t peak,
                              double *cost)
{
    double span = ws->vg[ws->n - 1] - ws->vg[0];
    double d = peak_half_width_V(ws, curve, peak) / M_SQRT3;
    d = GSL_MIN(GSL_MAX(d, 1e-4 * span), span);
    static const double factors[] = { 0.5, 1.0, 2.0 };
    double best_b = log(d);
    *cost = HUGE_VAL;
    for (size_t i = 0; i < sizeof factors / sizeof factors[0]; i++) {
        double b = log(d * factors[i]);
        ws->have_state = false;
        project(ws, ws->vg[peak], b);
        if (ws->chisq < *cost && ws->k > 0.0) {
            *cost = ws->chisq;
            best_b = b;
        }
    }
    return best_b;
}

static bool interior(size_t index, size_t n)
{
    size_t edge = SMOOTH_WINDOW / 2;
    return index >= edge && index + edge < n;
}

/* Start at the peak of the moving median (robust to spikes) or of the raw
 * readings (a peak only a point or two wide on a coarse sweep, which the
 * median removes), whichever has the lower projected cost. */
static void choose_start(sl_fit_workspace *ws, double *v0, double *b)
{
    const double *curves[2] = { ws->smooth, ws->r };
    double best_cost = HUGE_VAL;
    for (size_t c = 0; c < 2; c++) {
        size_t peak = gsl_stats_max_index(curves[c], 1, ws->n);
        if (!interior(peak, ws->n))
            continue;
        double cost, width = start_log_width(ws, curves[c], peak, &cost);
        if (cost < best_cost || best_cost == HUGE_VAL) {
            best_cost = cost;
            *v0 = ws->vg[peak];
            *b = width;
        }
    }
}

/* ---- classification before fitting ---- */

static bool any_open(const double *r_ohm, size_t n, double open_min_ohm)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(r_ohm[i]) || r_ohm[i] >= open_min_ohm)
            return true;
    return false;
}

/* Sorted copies of the sweep, weights u = 1/R and the moving median. */
static void prepare(sl_fit_workspace *ws, const double *vg_V, const double *r_ohm, size_t n)
{
    ws->n = n;
    ws->fix_rc_zero = false;
    ws->have_state = false;
    memcpy(ws->vg, vg_V, n * sizeof *vg_V);
    memcpy(ws->r, r_ohm, n * sizeof *r_ohm);
    bool sorted = true;
    for (size_t i = 1; i < n && sorted; i++)
        sorted = ws->vg[i - 1] <= ws->vg[i];
    if (!sorted)
        gsl_sort2(ws->vg, 1, ws->r, 1, n);
    ws->saa = 0.0;
    for (size_t i = 0; i < n; i++) {
        ws->u[i] = 1.0 / ws->r[i];
        ws->saa += ws->u[i] * ws->u[i];
    }
    gsl_vector_const_view in = gsl_vector_const_view_array(ws->r, n);
    gsl_vector_view out = gsl_vector_view_array(ws->smooth, n);
    gsl_movstat_median(GSL_MOVSTAT_END_TRUNCATE, &in.vector, &out.vector, ws->movstat);
}

static double median_ohm(sl_fit_workspace *ws)
{
    memcpy(ws->col, ws->r, ws->n * sizeof *ws->r);
    gsl_sort(ws->col, 1, ws->n);
    return gsl_stats_median_from_sorted_data(ws->col, 1, ws->n);
}

/* Class decided from the readings alone, or SL_FIT_OK to go on fitting. */
static sl_fit_class classify_readings(sl_fit_workspace *ws, const sl_fit_config *cfg)
{
    size_t n = ws->n;
    double r_min, r_max, s_min, s_max;
    gsl_stats_minmax(&r_min, &r_max, ws->r, 1, n);
    gsl_stats_minmax(&s_min, &s_max, ws->smooth, 1, n);
    bool flat = s_min <= 0.0 || s_max / s_min - 1.0 < cfg->min_modulation;
    if (r_max < cfg->short_max_ohm)
        return SL_FIT_SHORT;
    if (flat && median_ohm(ws) < cfg->short_flat_max_ohm)
        return SL_FIT_SHORT;
    if (r_min <= 0.0 || flat)
        return SL_FIT_POOR;
    if (interior(gsl_stats_max_index(ws->smooth, 1, n), n) ||
        interior(gsl_stats_max_index(ws->r, 1, n), n))
        return SL_FIT_OK;
    /* Highest at an end, smoothed or not: a neutrality point beyond the
     * sweep if the curve rises steadily towards it, otherwise noise without
     * a gate response. */
    double rho = gsl_stats_spearman(ws->vg, 1, ws->r, 1, n, ws->rank_work);
    return fabs(rho) >= MONOTONIC_MIN_RANK_CORRELATION ? SL_FIT_CNP_OUTSIDE : SL_FIT_POOR;
}

/* ---- results ---- */

static void set_nan(sl_fit_params *p)
{
    p->cnp_V = p->mobility_cm2_per_Vs = p->n0_per_cm2 = p->r_contact_ohm = NAN;
}

static void quality(sl_fit_result *out, sl_fit_workspace *ws)
{
    double ss_rel = 0.0, ss_res = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double e = ws->r[i] - (ws->rc + ws->k * ws->g[i]);
        ss_res += e * e;
        ss_rel += (e / ws->r[i]) * (e / ws->r[i]);
    }
    double mean = gsl_stats_mean(ws->r, 1, ws->n);
    double ss_tot = gsl_stats_tss_m(ws->r, 1, ws->n, mean);
    out->rel_rms = sqrt(ss_rel / (double)ws->n);
    out->r_squared = ss_tot > 0.0 ? 1.0 - ss_res / ss_tot : 0.0;
}

/* Jacobian of the relative residuals in all four parameters (V0, d, K, R_c)
 * at the solution, and J^T J (lower triangle) summed on the way. */
static gsl_matrix_view natural_jacobian(sl_fit_workspace *ws, double v0, double d)
{
    gsl_matrix_view jac = gsl_matrix_view_array(ws->jac4, ws->n, N_ALL);
    gsl_matrix_set_zero(ws->cov4);
    double *jtj = ws->cov4->data;
    for (size_t i = 0; i < ws->n; i++) {
        double u = ws->u[i], g = ws->g[i], kg3u = ws->k * g * g * g * u;
        double *row = ws->jac4 + i * N_ALL;
        row[0] = -(ws->vg[i] - v0) * kg3u;
        row[1] = d * kg3u;
        row[2] = -g * u;
        row[3] = -u;
        for (size_t a = 0; a < N_ALL; a++)
            for (size_t b = 0; b <= a; b++)
                jtj[a * N_ALL + b] += row[a] * row[b];
    }
    return jac;
}

/* (J^T J)^-1 by Cholesky, the 4x4 normal matrix being well conditioned at a
 * good fit; GSL's rank-revealing QR covariance when it is not. */
static void unscaled_covariance(sl_fit_workspace *ws, const gsl_matrix *jac)
{
    if (gsl_linalg_cholesky_decomp1(ws->cov4) == GSL_SUCCESS &&
        gsl_linalg_cholesky_invert(ws->cov4) == GSL_SUCCESS)
        return;
    gsl_multifit_nlinear_covar(jac, 0.0, ws->cov4);
}

/* Parameters in trade units and their standard errors from the covariance
 * (J^T J)^-1 scaled by the residual variance chi^2 / (n - 4). */
static void fill_parameters(sl_fit_result *out, sl_fit_workspace *ws, const sl_fit_config *cfg,
                            double v0, double d)
{
    double cg = cfg->gate_capacitance_F_per_m2;
    double n0_per_cm2_per_V = cg / SL_SI_ELEMENTARY_CHARGE * SL_PER_CM2_PER_PER_M2;
    out->p.cnp_V = v0;
    out->p.n0_per_cm2 = d * n0_per_cm2_per_V;
    out->p.mobility_cm2_per_Vs = cfg->length_over_width / (cg * ws->k) / SL_M2_PER_CM2;
    out->p.r_contact_ohm = ws->rc;
    gsl_matrix_view jac = natural_jacobian(ws, v0, d);
    unscaled_covariance(ws, &jac.matrix);
    double var = ws->chisq / (double)(ws->n - N_ALL);
    double sd[N_ALL];
    for (size_t j = 0; j < N_ALL; j++)
        sd[j] = sqrt(var * gsl_matrix_get(ws->cov4, j, j));
    out->sigma.cnp_V = sd[0];
    out->sigma.n0_per_cm2 = sd[1] * n0_per_cm2_per_V;
    out->sigma.mobility_cm2_per_Vs = out->p.mobility_cm2_per_Vs * sd[2] / ws->k;
    out->sigma.r_contact_ohm = sd[3];
}

/* Projected search, with R_c held at its bound 0 when the free optimum is
 * negative. */
static int projected_search(sl_fit_workspace *ws, const sl_fit_config *cfg, double *v0,
                            double *b, int *iterations)
{
    ws->fix_rc_zero = false;
    int st = run_search(ws, cfg, v0, b, iterations);
    if (st == GSL_SUCCESS && ws->rc < 0.0) {
        ws->fix_rc_zero = true;
        st = run_search(ws, cfg, v0, b, iterations);
    }
    return st;
}

static bool solution_finite(const sl_fit_workspace *ws, double v0, double b)
{
    return isfinite(v0) && isfinite(b) && isfinite(ws->k) && isfinite(ws->rc);
}

/* The chosen search, the full one as fallback when the projected one fails. */
static sl_fit_class search(sl_fit_workspace *ws, const sl_fit_config *cfg, double *v0,
                           double *b, int *iterations)
{
    double start_v0 = *v0, start_b = *b;
    int st = GSL_FAILURE;
    if (cfg->method == SL_FIT_METHOD_PROJECTED)
        st = projected_search(ws, cfg, v0, b, iterations);
    if (st != GSL_SUCCESS || !solution_finite(ws, *v0, *b)) {
        *v0 = start_v0;
        *b = start_b;
        st = run_full_search(ws, cfg, v0, b, iterations);
    }
    if (st != GSL_SUCCESS || !solution_finite(ws, *v0, *b))
        return SL_FIT_NO_CONVERGENCE;
    if (ws->k <= 0.0)
        return SL_FIT_POOR;   /* a dip, not a peak */
    return SL_FIT_OK;
}

static sl_status check_input(const sl_fit_workspace *ws, const sl_fit_config *cfg,
                             const double *vg_V, size_t n)
{
    if (n < SL_FIT_MIN_POINTS || n > ws->max_points)
        return SL_EINPUT;
    if (!(cfg->gate_capacitance_F_per_m2 > 0.0) || !(cfg->length_over_width > 0.0) ||
        cfg->max_iterations < 1)
        return SL_EINPUT;
    bool distinct = false;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(vg_V[i]))
            return SL_EINPUT;
        distinct = distinct || vg_V[i] != vg_V[0];
    }
    return distinct ? SL_OK : SL_EINPUT;
}

sl_status sl_fit_sweep(sl_fit_result *out, sl_fit_workspace *ws, const sl_fit_config *cfg,
                       const double *vg_V, const double *r_ohm, size_t n_points)
{
    memset(out, 0, sizeof *out);
    set_nan(&out->p);
    set_nan(&out->sigma);
    out->rel_rms = out->r_squared = NAN;
    out->n_points = n_points;
    sl_status st = check_input(ws, cfg, vg_V, n_points);
    if (st != SL_OK)
        return st;
    if (any_open(r_ohm, n_points, cfg->open_min_ohm)) {
        out->cls = SL_FIT_OPEN;
        return SL_OK;
    }
    if (ensure_solvers(ws, n_points) != SL_OK)
        return SL_ENOMEM;
    prepare(ws, vg_V, r_ohm, n_points);
    out->cls = classify_readings(ws, cfg);
    if (out->cls != SL_FIT_OK)
        return SL_OK;
    double v0 = 0.0, b = 0.0;
    choose_start(ws, &v0, &b);
    out->cls = search(ws, cfg, &v0, &b, &out->iterations);
    if (out->cls == SL_FIT_NO_CONVERGENCE)
        return SL_OK;
    quality(out, ws);
    /* A poor fit says nothing about where the neutrality point is. */
    if (out->cls == SL_FIT_OK &&
        (out->rel_rms > cfg->poor_max_rel_rms || out->r_squared < cfg->poor_min_r_squared))
        out->cls = SL_FIT_POOR;
    else if (out->cls == SL_FIT_OK && (v0 < ws->vg[0] || v0 > ws->vg[ws->n - 1]))
        out->cls = SL_FIT_CNP_OUTSIDE;
    if (out->cls == SL_FIT_OK)
        fill_parameters(out, ws, cfg, v0, exp(b));
    return SL_OK;
}
