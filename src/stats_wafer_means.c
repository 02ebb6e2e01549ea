/* SPDX-License-Identifier: MIT
 * Statistics of wafer means (see include/splitlot/stats.h): the
 * least-squares fit of wafer means with variance components, the
 * censored-normal maximum-likelihood mean of a wafer, and random-effects
 * pooling of per-lot estimates. Numbers only; no I/O.
 */
#include "splitlot/stats.h"

#include <math.h>
#include <stdlib.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_min.h>
#include <gsl/gsl_sf_erf.h>

/* Grid points that find a starting point inside the bracket of the
 * censored likelihood, and the minimiser's iteration cap. */
#define CENSORED_GRID 64
#define CENSORED_MAX_ITER 200
/* The minimiser stops when the bracket is narrower than CENSORED_TOL sigma
 * (a minimum is located to about sqrt(machine epsilon) only); the curvature
 * is a central difference with this step in sigmas. */
#define CENSORED_TOL 1e-6
#define CENSORED_CURVATURE_STEP 1e-3

/* ---- Variance components --------------------------------------------------- */

/* sigma_u^2 by the moments of the ordinary residuals (see the header). */
static double unit_variance(const sl_stats_fit *ols, const double *x, const double *v)
{
    size_t n = ols->n_obs, p = ols->n_coef;
    if (ols->df_resid == 0)
        return NAN;
    if (!(ols->resid_var > 0.0) || !v)
        return fmax(0.0, ols->resid_var);
    double expected_sampling = 0.0;
    for (size_t i = 0; i < n; i++) {
        const double *xi = x + i * p;
        double h = 0.0; /* x_i' (X'X)^-1 x_i, (X'X)^-1 = cov / s^2 */
        for (size_t a = 0; a < p; a++)
            for (size_t b = 0; b < p; b++)
                h += xi[a] * ols->cov[a * p + b] * xi[b];
        expected_sampling += (1.0 - h / ols->resid_var) * v[i];
    }
    return fmax(0.0, (ols->chi2 - expected_sampling) / (double)ols->df_resid);
}

static int variances_valid(const double *v, size_t n, int *any_positive)
{
    *any_positive = 0;
    for (size_t i = 0; v && i < n; i++) {
        if (!(isfinite(v[i]) && v[i] >= 0.0))
            return 0;
        *any_positive |= v[i] > 0.0;
    }
    return 1;
}

sl_status sl_stats_fit_components(sl_stats_fit **out, double *unit_var, const double *x,
                                  const double *y, const double *v, size_t n_obs,
                                  size_t n_coef, sl_diag *diag)
{
    *out = NULL;
    *unit_var = NAN;
    int any_v = 0;
    if (!variances_valid(v, n_obs, &any_v)) {
        sl_diag_error(diag, "a sampling variance is negative or not a finite number");
        return SL_EINPUT;
    }
    sl_stats_fit *ols = NULL;
    sl_status st = sl_stats_linear_fit(&ols, x, y, NULL, n_obs, n_coef, diag);
    if (st != SL_OK || !any_v) {
        if (st == SL_OK)
            *unit_var = ols->df_resid ? ols->resid_var : NAN;
        *out = ols;
        return st;
    }
    double su2 = unit_variance(ols, x, v);
    sl_stats_fit_free(ols);
    double *w = malloc(n_obs * sizeof *w);
    if (!w)
        return SL_ENOMEM;
    /* with no df the unit variance is unknown: weigh by sampling alone,
     * and a unit without sampling variance by the smallest other */
    double floor_v = INFINITY;
    for (size_t i = 0; i < n_obs; i++)
        if (v[i] > 0.0 && v[i] < floor_v)
            floor_v = v[i];
    for (size_t i = 0; i < n_obs; i++) {
        double var = (isfinite(su2) ? su2 : 0.0) + v[i];
        w[i] = 1.0 / (var > 0.0 ? var : floor_v);
    }
    st = sl_stats_linear_fit(out, x, y, w, n_obs, n_coef, diag);
    free(w);
    *unit_var = su2;
    return st;
}

/* ---- Censored-normal maximum likelihood ------------------------------------ */

typedef struct {
    double n, xbar, sigma;
    double n_above, above, n_below, below;
} censored_sample;

/* log Q(z), upper tail of the standard normal, stable far in both tails. */
static double log_upper_tail(double z)
{
    return log(0.5) + gsl_sf_log_erfc(z / M_SQRT2);
}

static double censored_negloglik(double mu, void *params)
{
    const censored_sample *c = params;
    double z = (c->xbar - mu) / c->sigma, f = 0.5 * c->n * z * z;
    if (c->n_above > 0.0)
        f -= c->n_above * log_upper_tail((c->above - mu) / c->sigma);
    if (c->n_below > 0.0) /* log P(z) = log Q(-z) */
        f -= c->n_below * log_upper_tail((mu - c->below) / c->sigma);
    return f;
}

/* A bracket that holds the minimum: the score n (xbar - mu) / sigma^2 plus
 * inverse Mills ratio terms below phi(0)/Q(0) < 0.8 per value and sigma on
 * the far side of a bound changes sign within 0.8 k / n sigmas of the data. */
static void censored_bracket(const censored_sample *c, double *lo, double *hi)
{
    double top = c->xbar, bottom = c->xbar;
    if (c->n_above > 0.0)
        top = fmax(top, c->above);
    if (c->n_below > 0.0)
        bottom = fmin(bottom, c->below);
    *lo = bottom - (0.8 * c->n_below / c->n + 2.0) * c->sigma;
    *hi = top + (0.8 * c->n_above / c->n + 2.0) * c->sigma;
}

/* Lowest interior point of a grid over (lo, hi). */
static double censored_start(const censored_sample *c, double lo, double hi)
{
    double best = 0.5 * (lo + hi), best_f = INFINITY;
    for (int i = 1; i < CENSORED_GRID; i++) {
        double mu = lo + (hi - lo) * i / CENSORED_GRID, f = censored_negloglik(mu, (void *)c);
        if (f < best_f) {
            best_f = f;
            best = mu;
        }
    }
    return best;
}

static int censored_minimise(double *mean, censored_sample *c)
{
    double lo, hi;
    censored_bracket(c, &lo, &hi);
    double mu = censored_start(c, lo, hi);
    gsl_function fn = { censored_negloglik, c };
    gsl_min_fminimizer *m = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
    if (!m)
        return GSL_ENOMEM;
    int st = gsl_min_fminimizer_set(m, &fn, mu, lo, hi);
    for (int it = 0; st == GSL_SUCCESS && it < CENSORED_MAX_ITER; it++) {
        if ((st = gsl_min_fminimizer_iterate(m)) != GSL_SUCCESS)
            break;
        double a = gsl_min_fminimizer_x_lower(m), b = gsl_min_fminimizer_x_upper(m);
        if (gsl_min_test_interval(a, b, CENSORED_TOL * c->sigma, 0.0) == GSL_SUCCESS) {
            *mean = gsl_min_fminimizer_x_minimum(m);
            gsl_min_fminimizer_free(m);
            return GSL_SUCCESS;
        }
    }
    gsl_min_fminimizer_free(m);
    return st == GSL_SUCCESS ? GSL_EMAXITER : st;
}

sl_status sl_stats_censored_mean(double *mean, double *se, size_t n, double xbar, double sigma,
                                 size_t n_above, double above, size_t n_below, double below)
{
    censored_sample c = { (double)n, xbar, sigma, (double)n_above, above, (double)n_below, below };
    if (!(isfinite(sigma) && sigma > 0.0) || (n > 0 && !isfinite(xbar)) ||
        (n_above && !isfinite(above)) || (n_below && !isfinite(below)))
        return SL_EINPUT;
    /* without a value seen the mean rests on the bounds alone (and with
     * censoring on one side only the likelihood rises without end) */
    if (n == 0)
        return SL_EINPUT;
    if (n_above == 0 && n_below == 0) {
        *mean = xbar;
        if (se)
            *se = sigma / sqrt((double)n);
        return SL_OK;
    }
    int st = censored_minimise(mean, &c);
    if (st != GSL_SUCCESS)
        return st == GSL_ENOMEM ? SL_ENOMEM : SL_ENUM;
    if (se) {
        double h = CENSORED_CURVATURE_STEP * sigma;
        double curv = (censored_negloglik(*mean + h, &c) - 2.0 * censored_negloglik(*mean, &c) +
                       censored_negloglik(*mean - h, &c)) / (h * h);
        *se = curv > 0.0 ? 1.0 / sqrt(curv) : NAN;
    }
    return SL_OK;
}

/* ---- Random-effects pooling ------------------------------------------------ */

sl_status sl_stats_pool_random_effects(sl_stats_pooled *out, const double *est,
                                       const double *se, size_t k)
{
    sl_status st = sl_stats_pool_inverse_variance(out, est, se, k);
    if (st != SL_OK)
        return st;
    if (k == 1) {
        out->tau = NAN;
        return SL_OK;
    }
    double sum_w = 0.0, sum_w2 = 0.0;
    for (size_t i = 0; i < k; i++) {
        double w = 1.0 / (se[i] * se[i]);
        sum_w += w;
        sum_w2 += w * w;
    }
    double tau2 = fmax(0.0, (out->q - out->df) / (sum_w - sum_w2 / sum_w));
    double sum_ws = 0.0, sum_wse = 0.0;
    for (size_t i = 0; i < k; i++) {
        double w = 1.0 / (se[i] * se[i] + tau2);
        sum_ws += w;
        sum_wse += w * est[i];
    }
    out->tau = sqrt(tau2);
    out->value = sum_wse / sum_ws;
    out->se = 1.0 / sqrt(sum_ws);
    return SL_OK;
}
