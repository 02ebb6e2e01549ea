/* SPDX-License-Identifier: MIT
 * The planner's statistics (see include/splitlot/stats.h): the noncentral t
 * by quadrature over the chi-square (GSL has none), the verdict of a level
 * against its plan, the power of an off-plan verdict, and the covariance of
 * generalised least squares of wafer means with shared loads.
 */
#include "splitlot/stats.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>

#include "stats_internal.h"

#define NCT_WORKSPACE 256
#define NCT_EPSABS 1e-12
#define NCT_EPSREL 1e-10
#define NCT_SPREAD 40.0 /* chi-square mass beyond df +/- 40 sd is negligible */

/* ---- noncentral t ---- */

typedef struct {
    double t, df, nc;
} nct_args;

/* P[Z > t sqrt(v/df) - nc] times the chi-square density of v. */
static double nct_integrand(double v, void *p)
{
    const nct_args *a = p;
    return gsl_cdf_ugaussian_Q(a->t * sqrt(v / a->df) - a->nc) * gsl_ran_chisq_pdf(v, a->df);
}

double sl_stats_nct_sf(double t, double df, double nc)
{
    if (!(df > 0.0) || isnan(t) || isnan(nc))
        return NAN;
    if (isinf(t))
        return t > 0 ? 0.0 : 1.0;
    nct_args a = { t, df, nc };
    gsl_function f = { nct_integrand, &a };
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(NCT_WORKSPACE);
    if (!w)
        return NAN;
    double spread = NCT_SPREAD * sqrt(2.0 * df);
    double lo = fmax(0.0, df - spread), hi = df + spread + NCT_SPREAD;
    double result = NAN, abserr = 0.0;
    int st = gsl_integration_qags(&f, lo, hi, NCT_EPSABS, NCT_EPSREL, NCT_WORKSPACE, w, &result,
                                  &abserr);
    gsl_integration_workspace_free(w);
    if (st != GSL_SUCCESS && !(st == GSL_EROUND && abserr < 1e-9))
        return NAN;
    return fmin(1.0, fmax(0.0, result));
}

double sl_stats_nct_cdf(double t, double df, double nc)
{
    return 1.0 - sl_stats_nct_sf(t, df, nc);
}

/* ---- verdict and power ---- */

static const char *const verdict_names[] = { "inconclusive", "as-planned", "off-plan", "differs" };

const char *sl_stats_plan_verdict_name(sl_stats_plan_verdict_kind verdict)
{
    return (unsigned)verdict < 4 ? verdict_names[verdict] : "inconclusive";
}

sl_stats_plan_verdict_kind sl_stats_plan_verdict(double d, double se, double df,
                                                 double tolerance, double alpha)
{
    if (!(df >= 1.0) || !isfinite(se) || !isfinite(d) || !(se >= 0.0) || !(alpha > 0.0) ||
        !(alpha < 1.0))
        return SL_PLAN_VERDICT_INCONCLUSIVE;
    double half = gsl_cdf_tdist_Pinv(1.0 - 0.5 * alpha, df) * se;
    double lo = d - half, hi = d + half;
    if (lo > tolerance || hi < -tolerance)
        return SL_PLAN_VERDICT_OFF_PLAN;
    if (lo >= -tolerance && hi <= tolerance)
        return SL_PLAN_VERDICT_AS_PLANNED;
    if (lo > 0.0 || hi < 0.0)
        return SL_PLAN_VERDICT_DIFFERS;
    return SL_PLAN_VERDICT_INCONCLUSIVE;
}

static int power_args_ok(double se, double tolerance, double alpha)
{
    return se > 0.0 && isfinite(se) && tolerance >= 0.0 && alpha > 0.0 && alpha < 1.0;
}

double sl_stats_offplan_power(double se, double df, double tolerance, double shift,
                              double alpha)
{
    if (!power_args_ok(se, tolerance, alpha) || !(shift >= 0.0))
        return NAN;
    if (!(df >= 1.0))
        return 0.0;
    double t = gsl_cdf_tdist_Pinv(1.0 - 0.5 * alpha, df);
    return sl_stats_nct_sf(t, df, shift / se) +
           sl_stats_nct_cdf(-t, df, (2.0 * tolerance + shift) / se);
}

double sl_stats_offplan_false_rate(double se, double df, double tolerance, double alpha)
{
    if (!power_args_ok(se, tolerance, alpha))
        return NAN;
    if (!(df >= 1.0))
        return 0.0;
    double t = gsl_cdf_tdist_Pinv(1.0 - 0.5 * alpha, df);
    return 2.0 * sl_stats_nct_sf(t, df, -tolerance / se);
}

/* ---- generalised least squares ---- */

/* B = I / s2b + Z^T D^-1 Z and C = Z^T D^-1 M side by side in work. */
static void load_blocks(gsl_matrix *work, const double *m, size_t q, const double *d,
                        const double *z, size_t n, size_t L, double s2b)
{
    gsl_matrix_set_zero(work);
    for (size_t k = 0; k < L; k++)
        gsl_matrix_set(work, k, k, 1.0 / s2b);
    for (size_t i = 0; i < n; i++)
        for (size_t k = 0; k < L; k++) {
            double zk = z[i * L + k] / d[i];
            if (zk == 0.0)
                continue;
            for (size_t l = 0; l < L; l++)
                *gsl_matrix_ptr(work, k, l) += zk * z[i * L + l];
            for (size_t c = 0; c < q; c++)
                *gsl_matrix_ptr(work, k, L + c) += zk * m[i * q + c];
        }
}

int stats_gls_gram(gsl_matrix *g, double *logdet, const double *m, size_t q, const double *d,
                   const double *z, size_t n, size_t L, double s2b, gsl_matrix *work)
{
    double ld = 0.0;
    gsl_matrix_set_zero(g);
    for (size_t i = 0; i < n; i++) {
        ld += log(d[i]);
        for (size_t a = 0; a < q; a++)
            for (size_t b = a; b < q; b++)
                *gsl_matrix_ptr(g, a, b) += m[i * q + a] * m[i * q + b] / d[i];
    }
    if (L > 0 && s2b > 0.0) {
        load_blocks(work, m, q, d, z, n, L, s2b);
        gsl_matrix_view bm = gsl_matrix_submatrix(work, 0, 0, L, L);
        gsl_matrix_view cm = gsl_matrix_submatrix(work, 0, L, L, q);
        if (gsl_linalg_cholesky_decomp1(&bm.matrix) != GSL_SUCCESS)
            return -1;
        ld += (double)L * log(s2b);
        for (size_t k = 0; k < L; k++)
            ld += 2.0 * log(gsl_matrix_get(&bm.matrix, k, k));
        /* L^-1 C, then G -= (L^-1 C)^T (L^-1 C) */
        gsl_blas_dtrsm(CblasLeft, CblasLower, CblasNoTrans, CblasNonUnit, 1.0, &bm.matrix,
                       &cm.matrix);
        for (size_t a = 0; a < q; a++)
            for (size_t b = a; b < q; b++) {
                double s = 0.0;
                for (size_t k = 0; k < L; k++)
                    s += gsl_matrix_get(&cm.matrix, k, a) * gsl_matrix_get(&cm.matrix, k, b);
                *gsl_matrix_ptr(g, a, b) -= s;
            }
    }
    for (size_t a = 0; a < q; a++)
        for (size_t b = 0; b < a; b++)
            gsl_matrix_set(g, a, b, gsl_matrix_get(g, b, a));
    if (logdet)
        *logdet = ld;
    return 0;
}

static int model_ok(const sl_stats_gls_model *m)
{
    if (!m->x || !m->var || m->n_coef == 0 || m->n_obs < m->n_coef ||
        (m->n_loads > 0 && !m->z) || !(m->load_var >= 0.0) || !isfinite(m->load_var))
        return 0;
    for (size_t i = 0; i < m->n_obs; i++)
        if (!(m->var[i] > 0.0) || !isfinite(m->var[i]))
            return 0;
    return 1;
}

sl_status sl_stats_gls_cov(double *cov, const sl_stats_gls_model *model)
{
    if (!model_ok(model))
        return SL_EINPUT;
    size_t p = model->n_coef, L = model->n_loads;
    gsl_matrix *g = gsl_matrix_alloc(p, p);
    gsl_matrix *work = L ? gsl_matrix_alloc(L, L + p) : NULL;
    if (!g || (L && !work)) {
        gsl_matrix_free(g);
        gsl_matrix_free(work);
        return SL_ENOMEM;
    }
    sl_status st = SL_OK;
    if (stats_gls_gram(g, NULL, model->x, p, model->var, model->z, model->n_obs, L,
                       model->load_var, work) != 0 ||
        gsl_linalg_cholesky_decomp1(g) != GSL_SUCCESS ||
        gsl_linalg_cholesky_invert(g) != GSL_SUCCESS)
        st = SL_ENUM;
    for (size_t a = 0; st == SL_OK && a < p; a++)
        for (size_t b = 0; b < p; b++)
            cov[a * p + b] = gsl_matrix_get(g, a, b);
    gsl_matrix_free(g);
    gsl_matrix_free(work);
    return st;
}

/* The column is the same on every wafer of each load and set in a load of
 * two or more wafers: a level that the loads carry. */
static int load_level_column(const sl_stats_gls_model *m, size_t col)
{
    int carried = 0;
    for (size_t k = 0; k < m->n_loads; k++) {
        size_t members = 0;
        double value = 0.0;
        for (size_t i = 0; i < m->n_obs; i++) {
            if (m->z[i * m->n_loads + k] == 0.0)
                continue;
            double x = m->x[i * m->n_coef + col];
            if (members++ > 0 && x != value)
                return 0;
            value = x;
        }
        carried |= members >= 2 && value != 0.0;
    }
    return carried;
}

void sl_stats_coef_df(double *df, const sl_stats_gls_model *model)
{
    long units = (long)model->n_obs;
    for (size_t k = 0; k < model->n_loads; k++) {
        long members = 0;
        for (size_t i = 0; i < model->n_obs; i++)
            members += model->z[i * model->n_loads + k] != 0.0;
        units -= members > 1 ? members - 1 : 0;
    }
    if (units < (long)model->n_loads)
        units = (long)model->n_loads;
    for (size_t c = 0; c < model->n_coef; c++) {
        double n = model->n_loads && load_level_column(model, c) ? (double)units
                                                                 : (double)model->n_obs;
        df[c] = n - (double)model->n_coef;
    }
}
