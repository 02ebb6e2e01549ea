/* SPDX-License-Identifier: MIT
 * Effects from wafer means with the wafer (or the load) as the unit (see
 * include/splitlot/stats.h): without loads the analysis's variance-components
 * least squares; with loads the wafer and load variance components by
 * restricted maximum likelihood with GSL's minimisers, then generalised least
 * squares. Numbers only: no plans here.
 */
#include "splitlot/stats.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_multimin.h>

#include "stats_internal.h"

#define GRID_2D 10          /* per axis, with loads */
#define RANGE_LO 1e-6       /* components searched over [1e-6, 1e2] x the OLS scale */
#define RANGE_HI 1e2
#define MAX_ITER 200

typedef struct {
    const sl_stats_wafer_data *in;
    size_t n, p, q, L;
    double *m;          /* [X y/k], n x q, y scaled by k */
    double *dev;        /* device part of each wafer's variance, scaled by k^2 */
    double *d;          /* work: diagonal of V */
    gsl_matrix *g, *work;
    double lo, hi;      /* log range of each component */
    stats_loads loads;
} reml;

/* -2 restricted log-likelihood (constants dropped) at wafer variance a and
 * load variance b; +inf where V or X^T V^-1 X is not positive definite. */
static double reml_objective(reml *r, double a, double b)
{
    double logdet_v = 0.0;
    for (size_t i = 0; i < r->n; i++)
        r->d[i] = a + r->dev[i];
    if (sl__stats_gls_gram(r->g, &logdet_v, r->m, r->q, r->d, r->n, &r->loads, b, r->work) != 0)
        return INFINITY;
    gsl_matrix_view xx = gsl_matrix_submatrix(r->g, 0, 0, r->p, r->p);
    gsl_vector_view xy = gsl_matrix_subcolumn(r->g, r->p, 0, r->p);
    double yy = gsl_matrix_get(r->g, r->p, r->p);
    if (gsl_linalg_cholesky_decomp1(&xx.matrix) != GSL_SUCCESS)
        return INFINITY;
    double logdet_x = 0.0;
    for (size_t k = 0; k < r->p; k++)
        logdet_x += 2.0 * log(gsl_matrix_get(&xx.matrix, k, k));
    /* r' V^-1 r = y'V^-1y - (X'V^-1y)' (X'V^-1X)^-1 (X'V^-1y) */
    gsl_blas_dtrsv(CblasLower, CblasNoTrans, CblasNonUnit, &xx.matrix, &xy.vector);
    double quad = yy;
    for (size_t k = 0; k < r->p; k++)
        quad -= gsl_vector_get(&xy.vector, k) * gsl_vector_get(&xy.vector, k);
    return logdet_v + logdet_x + fmax(quad, 0.0);
}

static double clamp(double u, double lo, double hi) { return u < lo ? lo : (u > hi ? hi : u); }

static double objective_2d(const gsl_vector *v, void *p)
{
    reml *r = p;
    double a = exp(clamp(gsl_vector_get(v, 0), r->lo, r->hi));
    double b = exp(clamp(gsl_vector_get(v, 1), r->lo, r->hi));
    return reml_objective(r, a, b);
}

/* Grid over both components, then the simplex method from the best point. */
static void minimise_2d(reml *r, double *a, double *b)
{
    double step = (r->hi - r->lo) / (GRID_2D - 1), best_f = INFINITY;
    double start[2] = { r->lo, r->lo };
    gsl_vector *x = gsl_vector_alloc(2), *steps = gsl_vector_alloc(2);
    gsl_multimin_fminimizer *m =
        gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, 2);
    for (size_t i = 0; x && i < GRID_2D; i++)
        for (size_t j = 0; j < GRID_2D; j++) {
            gsl_vector_set(x, 0, r->lo + step * (double)i);
            gsl_vector_set(x, 1, r->lo + step * (double)j);
            double f = objective_2d(x, r);
            if (f < best_f) {
                best_f = f;
                start[0] = gsl_vector_get(x, 0);
                start[1] = gsl_vector_get(x, 1);
            }
        }
    if (x && steps && m) {
        gsl_multimin_function fn = { objective_2d, 2, r };
        gsl_vector_set(x, 0, start[0]);
        gsl_vector_set(x, 1, start[1]);
        gsl_vector_set_all(steps, 0.5 * step);
        if (gsl_multimin_fminimizer_set(m, &fn, x, steps) == GSL_SUCCESS) {
            for (int it = 0; it < MAX_ITER; it++)
                if (gsl_multimin_fminimizer_iterate(m) != GSL_SUCCESS ||
                    gsl_multimin_test_size(gsl_multimin_fminimizer_size(m), 1e-5) == GSL_SUCCESS)
                    break;
            start[0] = gsl_vector_get(m->x, 0);
            start[1] = gsl_vector_get(m->x, 1);
        }
    }
    *a = exp(clamp(start[0], r->lo, r->hi));
    *b = exp(clamp(start[1], r->lo, r->hi));
    gsl_multimin_fminimizer_free(m);
    gsl_vector_free(x);
    gsl_vector_free(steps);
}

static int data_ok(const sl_stats_wafer_data *in)
{
    if (!in->x || !in->mean || !in->var ||
        in->n_coef == 0 || in->n_coef > SL_STATS_MAX_COEF || in->n_wafers <= in->n_coef ||
        (in->n_loads > 0 && (!in->load || in->n_steps == 0)))
        return 0;
    for (size_t i = 0; in->n_loads && i < in->n_wafers * in->n_steps; i++)
        if (in->load[i] >= (long)in->n_loads)
            return 0;
    for (size_t i = 0; i < in->n_wafers; i++)
        if (!isfinite(in->mean[i]) || !(in->var[i] >= 0.0) || !isfinite(in->var[i]))
            return 0;
    return 1;
}

static void reml_free(reml *r)
{
    free(r->m);
    free(r->dev);
    free(r->d);
    gsl_matrix_free(r->g);
    gsl_matrix_free(r->work);
}

static sl_status reml_init(reml *r, const sl_stats_wafer_data *in)
{
    r->in = in;
    r->n = in->n_wafers;
    r->p = in->n_coef;
    r->q = r->p + 1;
    r->L = in->n_loads;
    r->m = malloc(r->n * r->q * sizeof *r->m);
    r->dev = malloc(r->n * sizeof *r->dev);
    r->d = malloc(r->n * sizeof *r->d);
    r->g = gsl_matrix_alloc(r->q, r->q);
    r->loads = (stats_loads){ in->load, in->n_loads, in->n_steps };
    r->work = sl__stats_gls_work_alloc(&r->loads, r->q);
    if (!r->m || !r->dev || !r->d || !r->g || (r->L && !r->work))
        return SL_ENOMEM;
    for (size_t i = 0; i < r->n; i++) {
        memcpy(r->m + i * r->q, in->x + i * r->p, r->p * sizeof *r->m);
        r->m[i * r->q + r->p] = in->mean[i];
        r->dev[i] = in->var[i];
    }
    return SL_OK;
}

/* GLS at the chosen components, scale from the residuals: coef and se. */
static sl_status final_fit(sl_stats_wafer_fit *out, reml *r, double a, double b)
{
    for (size_t i = 0; i < r->n; i++)
        r->d[i] = a + r->dev[i];
    if (sl__stats_gls_gram(r->g, NULL, r->m, r->q, r->d, r->n, &r->loads, b, r->work) != 0)
        return SL_ENUM;
    gsl_matrix_view xx = gsl_matrix_submatrix(r->g, 0, 0, r->p, r->p);
    gsl_vector_view xy = gsl_matrix_subcolumn(r->g, r->p, 0, r->p);
    double yy = gsl_matrix_get(r->g, r->p, r->p);
    gsl_vector *beta = gsl_vector_alloc(r->p);
    if (!beta)
        return SL_ENOMEM;
    sl_status st = SL_OK;
    if (gsl_linalg_cholesky_decomp1(&xx.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_solve(&xx.matrix, &xy.vector, beta) != GSL_SUCCESS ||
        gsl_linalg_cholesky_invert(&xx.matrix) != GSL_SUCCESS)
        st = SL_ENUM;
    double quad = yy;
    for (size_t k = 0; st == SL_OK && k < r->p; k++)
        quad -= gsl_vector_get(beta, k) * gsl_vector_get(&xy.vector, k);
    double scale = fmax(quad, 0.0) / (double)(r->n - r->p);
    for (size_t k = 0; st == SL_OK && k < r->p; k++) {
        out->coef[k] = gsl_vector_get(beta, k);
        out->se[k] = sqrt(scale * gsl_matrix_get(&xx.matrix, k, k));
    }
    gsl_vector_free(beta);
    return st;
}

/* Without loads: the analysis's variance-components least squares. */
static sl_status components_fit(sl_stats_wafer_fit *out, const sl_stats_wafer_data *in)
{
    sl_stats_fit *fit = NULL;
    double unit_var = NAN;
    sl_status st = sl_stats_fit_components(&fit, &unit_var, in->x, in->mean, in->var,
                                           in->n_wafers, in->n_coef, NULL);
    if (st == SL_EINPUT)
        st = SL_ENUM; /* the data were checked: a singular design */
    for (size_t k = 0; st == SL_OK && k < in->n_coef; k++) {
        out->coef[k] = fit->coef[k];
        out->se[k] = fit->se[k];
        out->df[k] = (double)fit->df_resid;
    }
    out->n_coef = in->n_coef;
    out->wafer_sigma_per_cm2 = sqrt(unit_var);
    sl_stats_fit_free(fit);
    return st;
}

sl_status sl_stats_wafer_effects(sl_stats_wafer_fit *out, const sl_stats_wafer_data *in)
{
    memset(out, 0, sizeof *out);
    if (!data_ok(in))
        return SL_EINPUT;
    if (in->n_loads == 0)
        return components_fit(out, in);
    reml r = { 0 };
    sl_status st = reml_init(&r, in);
    if (st == SL_OK) {
        /* search the components on the scale of the variance of the means */
        double s0 = 0.0, mean = 0.0;
        for (size_t i = 0; i < r.n; i++)
            mean += in->mean[i] / (double)r.n;
        for (size_t i = 0; i < r.n; i++)
            s0 += (in->mean[i] - mean) * (in->mean[i] - mean) / (double)(r.n - 1);
        s0 = s0 > 0.0 ? s0 : 1.0;
        r.lo = log(RANGE_LO * s0);
        r.hi = log(RANGE_HI * s0);
        double a = 0.0, b = 0.0;
        minimise_2d(&r, &a, &b);
        /* a component at the bottom of its range is zero */
        a = a <= exp(r.lo) * 1.0001 ? 0.0 : a;
        b = b <= exp(r.lo) * 1.0001 ? 0.0 : b;
        int any_var = 1;
        for (size_t i = 0; i < r.n; i++)
            any_var &= a + r.dev[i] > 0.0;
        st = final_fit(out, &r, any_var ? a : a + exp(r.lo), b);
        out->n_coef = r.p;
        out->wafer_sigma_per_cm2 = sqrt(a);
        out->load_sigma_per_cm2 = sqrt(b);
        sl_stats_gls_model model = { r.n, r.p, r.L, in->n_steps, in->x, r.d, in->load, b };
        sl_stats_coef_df(out->df, &model);
    }
    reml_free(&r);
    return st;
}
