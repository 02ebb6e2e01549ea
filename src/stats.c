/* SPDX-License-Identifier: MIT
 * Statistics for split-lot analysis (see include/splitlot/stats.h): thin,
 * checked layers over GSL's statistics, sorting, distribution and multifit
 * routines. Nothing here knows about plans or lots; nothing prints.
 */
#include "splitlot/stats.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_multifit.h>
#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>
#include <gsl/gsl_vector.h>


static int all_finite(const double *x, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(x[i]))
            return 0;
    return 1;
}

static int is_probability(double p) { return p > 0.0 && p < 1.0; }

/* ---- Robust location, scale and outlier score ----------------------------- */

/* Median of a copy of x sorted in place in buf (n >= 1). */
static double median_via(double *buf, const double *x, size_t n)
{
    memcpy(buf, x, n * sizeof *buf);
    gsl_sort(buf, 1, n);
    return gsl_stats_median_from_sorted_data(buf, 1, n);
}

/* Median of |x_i - center| using buf (n >= 1). */
static double median_abs_dev_via(double *buf, const double *x, size_t n, double center)
{
    for (size_t i = 0; i < n; i++)
        buf[i] = fabs(x[i] - center);
    gsl_sort(buf, 1, n);
    return gsl_stats_median_from_sorted_data(buf, 1, n);
}

/* Checks a sample and hands out a work buffer of n doubles: the caller's
 * scratch, or a fresh one also stored in *owned for the caller to free. */
static sl_status sample_buffer(double **buf, double **owned, const double *x, size_t n,
                               double *scratch)
{
    *owned = NULL;
    if (n == 0 || !x || !all_finite(x, n))
        return SL_EINPUT;
    if (!scratch)
        scratch = *owned = malloc(n * sizeof *scratch);
    *buf = scratch;
    return scratch ? SL_OK : SL_ENOMEM;
}

sl_status sl_stats_median(double *median, const double *x, size_t n, double *scratch)
{
    double *buf, *owned;
    sl_status st = sample_buffer(&buf, &owned, x, n, scratch);
    if (st != SL_OK)
        return st;
    *median = median_via(buf, x, n);
    free(owned);
    return SL_OK;
}

static double modified_z_scale(double mad, double mean_ad)
{
    if (mad > 0.0)
        return mad / SL_STATS_MAD_FACTOR;
    return SL_STATS_MEANAD_FACTOR * mean_ad;
}

void sl_stats_robust_from(sl_stats_robust *out, size_t n, double median, double mad,
                          double mean_ad)
{
    out->n = n;
    out->median = median;
    out->mad = mad;
    out->mean_ad = mean_ad;
    out->scale = modified_z_scale(mad, mean_ad);
}

sl_status sl_stats_robust_scale(sl_stats_robust *out, const double *x, size_t n,
                                double *scratch)
{
    double *buf, *owned;
    sl_status st = sample_buffer(&buf, &owned, x, n, scratch);
    if (st != SL_OK)
        return st;
    double median = median_via(buf, x, n);
    double mad = median_abs_dev_via(buf, x, n, median);
    sl_stats_robust_from(out, n, median, mad, gsl_stats_absdev_m(x, 1, n, median));
    free(owned);
    return SL_OK;
}

double sl_stats_modified_z_of(const sl_stats_robust *robust, double x)
{
    if (robust->scale == 0.0)
        return 0.0;
    return (x - robust->median) / robust->scale;
}

sl_status sl_stats_modified_z(double *z, sl_stats_robust *robust, const double *x,
                              size_t n, double *scratch)
{
    sl_stats_robust r;
    sl_status st = sl_stats_robust_scale(&r, x, n, scratch);
    if (st != SL_OK)
        return st;
    for (size_t i = 0; i < n; i++)
        z[i] = sl_stats_modified_z_of(&r, x[i]);
    if (robust)
        *robust = r;
    return SL_OK;
}

/* ---- Sample summary -------------------------------------------------------- */

sl_status sl_stats_summarize(sl_stats_summary *out, const double *x, size_t n, double level)
{
    if (n == 0 || !x || !all_finite(x, n))
        return SL_EINPUT;
    double mean = gsl_stats_mean(x, 1, n);
    return sl_stats_summarize_moments(out, n, mean, n > 1 ? gsl_stats_sd_m(x, 1, n, mean) : NAN,
                                      level);
}

sl_status sl_stats_summarize_moments(sl_stats_summary *out, size_t n, double mean, double sd,
                                     double level)
{
    if (n == 0 || !isfinite(mean) || !is_probability(level) ||
        (n > 1 && !(isfinite(sd) && sd >= 0.0)))
        return SL_EINPUT;
    out->n = n;
    out->level = level;
    out->mean = mean;
    if (n == 1) {
        out->sd = out->se = out->t_crit = out->ci_low = out->ci_high = NAN;
        return SL_OK;
    }
    out->sd = sd;
    out->se = out->sd / sqrt((double)n);
    out->t_crit = gsl_cdf_tdist_Pinv(0.5 * (1.0 + level), (double)(n - 1));
    out->ci_low = out->mean - out->t_crit * out->se;
    out->ci_high = out->mean + out->t_crit * out->se;
    return SL_OK;
}

/* ---- Distributions --------------------------------------------------------- */

double sl_stats_t_quantile(double p, double df)
{
    if (!is_probability(p) || !(df > 0.0))
        return NAN;
    return gsl_cdf_tdist_Pinv(p, df);
}

double sl_stats_normal_quantile(double p)
{
    if (!is_probability(p))
        return NAN;
    return gsl_cdf_ugaussian_Pinv(p);
}

double sl_stats_t_p_two_sided(double t, double df)
{
    if (isnan(t) || !(df > 0.0))
        return NAN;
    return 2.0 * gsl_cdf_tdist_Q(fabs(t), df);
}

double sl_stats_z_p_two_sided(double z)
{
    if (isnan(z))
        return NAN;
    return 2.0 * gsl_cdf_ugaussian_Q(fabs(z));
}

/* ---- Treatment-coded design ------------------------------------------------ */

void sl_stats_design_free(sl_stats_design *design)
{
    if (!design)
        return;
    free(design->x);
    free(design->columns);
    free(design);
}

/* Checks n_levels and every observation's level; 1 when all are valid. */
static int design_levels_valid(const size_t *levels, size_t n_obs, size_t n_factors,
                               const size_t *n_levels, sl_diag *diag)
{
    for (size_t f = 0; f < n_factors; f++) {
        if (n_levels[f] == 0) {
            sl_diag_error(diag, "factor %zu has no levels", f);
            return 0;
        }
    }
    for (size_t i = 0; i < n_obs; i++) {
        for (size_t f = 0; f < n_factors; f++) {
            size_t lv = levels[i * n_factors + f];
            if (lv >= n_levels[f]) {
                sl_diag_error(diag, "observation %zu: level %zu of factor %zu is out of range "
                              "(factor has %zu levels)", i, lv, f, n_levels[f]);
                return 0;
            }
        }
    }
    return 1;
}

static void design_fill_columns(sl_stats_column *cols, size_t n_factors,
                                const size_t *n_levels)
{
    size_t c = 0;
    cols[c].factor = SL_STATS_INTERCEPT;
    cols[c++].level = 0;
    for (size_t f = 0; f < n_factors; f++) {
        for (size_t lv = 1; lv < n_levels[f]; lv++) {
            cols[c].factor = f;
            cols[c++].level = lv;
        }
    }
}

/* One row: intercept 1, then 1 in the column of each non-reference level. */
static void design_fill_row(double *row, const size_t *obs_levels, size_t n_factors,
                            const size_t *n_levels)
{
    size_t first = 1; /* first column of the current factor */
    row[0] = 1.0;
    for (size_t f = 0; f < n_factors; f++) {
        if (obs_levels[f] > 0)
            row[first + obs_levels[f] - 1] = 1.0;
        first += n_levels[f] - 1;
    }
}

sl_status sl_stats_design_treatment(sl_stats_design **out, const size_t *levels,
                                    size_t n_obs, size_t n_factors,
                                    const size_t *n_levels, sl_diag *diag)
{
    *out = NULL;
    if (n_obs == 0) {
        sl_diag_error(diag, "design has no observations");
        return SL_EINPUT;
    }
    if (!design_levels_valid(levels, n_obs, n_factors, n_levels, diag))
        return SL_EINPUT;
    size_t n_coef = 1;
    for (size_t f = 0; f < n_factors; f++)
        n_coef += n_levels[f] - 1;
    sl_stats_design *d = calloc(1, sizeof *d);
    if (!d)
        return SL_ENOMEM;
    d->n_obs = n_obs;
    d->n_coef = n_coef;
    d->x = calloc(n_obs * n_coef, sizeof *d->x);
    d->columns = calloc(n_coef, sizeof *d->columns);
    if (!d->x || !d->columns) {
        sl_stats_design_free(d);
        return SL_ENOMEM;
    }
    design_fill_columns(d->columns, n_factors, n_levels);
    for (size_t i = 0; i < n_obs; i++)
        design_fill_row(d->x + i * n_coef, levels + i * n_factors, n_factors, n_levels);
    *out = d;
    return SL_OK;
}

/* ---- Linear least squares -------------------------------------------------- */

void sl_stats_fit_free(sl_stats_fit *fit)
{
    if (!fit)
        return;
    free(fit->coef);
    free(fit->se);
    free(fit->cov);
    free(fit);
}

static sl_stats_fit *fit_alloc(size_t n_obs, size_t n_coef)
{
    sl_stats_fit *fit = calloc(1, sizeof *fit);
    if (!fit)
        return NULL;
    fit->n_obs = n_obs;
    fit->n_coef = n_coef;
    fit->df_resid = n_obs - n_coef;
    fit->coef = malloc(n_coef * sizeof *fit->coef);
    fit->se = malloc(n_coef * sizeof *fit->se);
    fit->cov = malloc(n_coef * n_coef * sizeof *fit->cov);
    if (!fit->coef || !fit->se || !fit->cov) {
        sl_stats_fit_free(fit);
        return NULL;
    }
    return fit;
}

/* Rank of the first n_cols columns of X (SVD of the column-balanced matrix);
 * (size_t)-1 when GSL fails. */
static size_t leading_columns_rank(const double *x, size_t n_obs, size_t n_coef,
                                   size_t n_cols)
{
    gsl_matrix_const_view xv =
        gsl_matrix_const_view_array_with_tda(x, n_obs, n_cols, n_coef);
    gsl_multifit_linear_workspace *work = gsl_multifit_linear_alloc(n_obs, n_cols);
    if (!work)
        return (size_t)-1;
    size_t rank = (size_t)-1;
    if (gsl_multifit_linear_svd(&xv.matrix, work) == GSL_SUCCESS)
        rank = gsl_multifit_linear_rank(SL_STATS_RANK_TOL, work);
    gsl_multifit_linear_free(work);
    return rank;
}

/* First column that does not raise the rank of the columns before it. Only
 * called once the whole matrix is known to be rank deficient. */
static size_t first_dependent_column(const double *x, size_t n_obs, size_t n_coef)
{
    for (size_t c = 1; c <= n_coef; c++)
        if (leading_columns_rank(x, n_obs, n_coef, c) < c)
            return c - 1;
    return n_coef - 1;
}

static sl_status check_full_rank(const double *x, size_t n_obs, size_t n_coef,
                                 sl_diag *diag)
{
    size_t rank = leading_columns_rank(x, n_obs, n_coef, n_coef);
    if (rank == (size_t)-1) {
        sl_diag_error(diag, "singular value decomposition of the design matrix failed");
        return SL_ENUM;
    }
    if (rank == n_coef)
        return SL_OK;
    sl_diag_error(diag, "design matrix is rank deficient (rank %zu of %zu columns): "
                  "column %zu is a linear combination of the columns before it",
                  rank, n_coef, first_dependent_column(x, n_obs, n_coef));
    return SL_EINPUT;
}

static sl_status check_fit_input(const double *x, const double *y, const double *w,
                                 size_t n_obs, size_t n_coef, sl_diag *diag)
{
    if (n_coef == 0 || n_obs < n_coef) {
        sl_diag_error(diag, "%zu observations cannot determine %zu coefficients",
                      n_obs, n_coef);
        return SL_EINPUT;
    }
    if (!all_finite(x, n_obs * n_coef) || !all_finite(y, n_obs)) {
        sl_diag_error(diag, "design matrix or response holds a value that is not a finite number");
        return SL_EINPUT;
    }
    for (size_t i = 0; w && i < n_obs; i++) {
        if (!(isfinite(w[i]) && w[i] > 0.0)) {
            sl_diag_error(diag, "weight %zu is %g; weights must be finite and positive",
                          i, w[i]);
            return SL_EINPUT;
        }
    }
    return SL_OK;
}

/* Runs the GSL fit; leaves cov as GSL returns it (scaled by s^2 unweighted,
 * (X'WX)^-1 weighted). */
static int gsl_fit(sl_stats_fit *fit, const double *x, const double *y, const double *w)
{
    size_t n = fit->n_obs, p = fit->n_coef;
    gsl_matrix_const_view xv = gsl_matrix_const_view_array(x, n, p);
    gsl_vector_const_view yv = gsl_vector_const_view_array(y, n);
    gsl_vector_view cv = gsl_vector_view_array(fit->coef, p);
    gsl_matrix_view covv = gsl_matrix_view_array(fit->cov, p, p);
    gsl_multifit_linear_workspace *work = gsl_multifit_linear_alloc(n, p);
    if (!work)
        return GSL_ENOMEM;
    int st;
    if (w) {
        gsl_vector_const_view wv = gsl_vector_const_view_array(w, n);
        st = gsl_multifit_wlinear(&xv.matrix, &wv.vector, &yv.vector, &cv.vector,
                                  &covv.matrix, &fit->chi2, work);
    } else {
        st = gsl_multifit_linear(&xv.matrix, &yv.vector, &cv.vector, &covv.matrix,
                                 &fit->chi2, work);
    }
    gsl_multifit_linear_free(work);
    return st;
}

/* Brings cov to s^2 (X'WX)^-1 in both cases and fills se; NaN when df = 0. */
static void fit_finish_covariance(sl_stats_fit *fit, int weighted)
{
    size_t p = fit->n_coef;
    fit->resid_var = fit->df_resid > 0 ? fit->chi2 / (double)fit->df_resid : NAN;
    for (size_t k = 0; k < p * p; k++) {
        if (fit->df_resid == 0)
            fit->cov[k] = NAN;
        else if (weighted)
            fit->cov[k] *= fit->resid_var;
    }
    for (size_t j = 0; j < p; j++)
        fit->se[j] = sqrt(fit->cov[j * p + j]);
}

static double fit_r_squared(double chi2, const double *y, const double *w, size_t n)
{
    double tss = w ? gsl_stats_wtss(w, 1, y, 1, n) : gsl_stats_tss(y, 1, n);
    return tss > 0.0 ? 1.0 - chi2 / tss : NAN;
}

sl_status sl_stats_linear_fit(sl_stats_fit **out, const double *x, const double *y,
                              const double *w, size_t n_obs, size_t n_coef,
                              sl_diag *diag)
{
    *out = NULL;
    sl_status st = check_fit_input(x, y, w, n_obs, n_coef, diag);
    if (st == SL_OK)
        st = check_full_rank(x, n_obs, n_coef, diag);
    if (st != SL_OK)
        return st;
    sl_stats_fit *fit = fit_alloc(n_obs, n_coef);
    if (!fit)
        return SL_ENOMEM;
    int gst = gsl_fit(fit, x, y, w);
    if (gst != GSL_SUCCESS) {
        sl_diag_error(diag, "least-squares fit failed: %s", gsl_strerror(gst));
        sl_stats_fit_free(fit);
        return gst == GSL_ENOMEM ? SL_ENOMEM : SL_ENUM;
    }
    fit_finish_covariance(fit, w != NULL);
    fit->r_squared = fit_r_squared(fit->chi2, y, w, n_obs);
    *out = fit;
    return SL_OK;
}

/* ---- One-way ANOVA --------------------------------------------------------- */

static void anova_set_nan(sl_stats_anova *out)
{
    out->ms_between = out->ms_within = out->f = out->p = NAN;
}

/* F and p from the sums of squares and degrees of freedom already in out. */
static void anova_finish(sl_stats_anova *out)
{
    if (out->n_groups < 2 || out->df_within <= 0.0) {
        anova_set_nan(out);
        if (out->n_groups >= 2)
            out->ms_between = out->ss_between / out->df_between;
        return;
    }
    out->ms_between = out->ss_between / out->df_between;
    out->ms_within = out->ss_within / out->df_within;
    if (out->ms_within > 0.0) {
        out->f = out->ms_between / out->ms_within;
        out->p = gsl_cdf_fdist_Q(out->f, out->df_between, out->df_within);
    } else if (out->ms_between > 0.0) {
        out->f = INFINITY;
        out->p = 0.0;
    } else {
        out->f = out->p = NAN;
    }
}

/* Means and sample variances (n - 1) of the groups of x, one after the other. */
static void group_moments(double *means, double *variances, const double *x,
                          const size_t *group_sizes, size_t n_groups)
{
    const double *g = x;
    for (size_t k = 0; k < n_groups; g += group_sizes[k], k++) {
        size_t m = group_sizes[k];
        means[k] = m > 0 ? gsl_stats_mean(g, 1, m) : NAN;
        variances[k] = m > 1 ? gsl_stats_variance_m(g, 1, m, means[k]) : 0.0;
    }
}

sl_status sl_stats_anova_oneway(sl_stats_anova *out, double *group_means,
                                const double *x, const size_t *group_sizes,
                                size_t n_groups)
{
    size_t n_total = 0;
    for (size_t k = 0; k < n_groups; k++)
        n_total += group_sizes[k];
    if (n_total > 0 && (!x || !all_finite(x, n_total)))
        return SL_EINPUT;
    double *means = malloc((n_groups + 1) * sizeof *means);
    double *variances = malloc((n_groups + 1) * sizeof *variances);
    if (!means || !variances) {
        free(means);
        free(variances);
        return SL_ENOMEM;
    }
    group_moments(means, variances, x, group_sizes, n_groups);
    sl_status st = sl_stats_anova_moments(out, group_sizes, means, variances, n_groups);
    if (group_means)
        memcpy(group_means, means, n_groups * sizeof *means);
    free(means);
    free(variances);
    return st;
}

sl_status sl_stats_anova_moments(sl_stats_anova *out, const size_t *group_sizes,
                                 const double *group_means, const double *group_variances,
                                 size_t n_groups)
{
    memset(out, 0, sizeof *out);
    double weighted_sum = 0.0;
    for (size_t k = 0; k < n_groups; k++) {
        size_t m = group_sizes[k];
        if (m == 0)
            continue;
        if (!isfinite(group_means[k]) || (m > 1 && !(isfinite(group_variances[k]) &&
                                                     group_variances[k] >= 0.0)))
            return SL_EINPUT;
        out->n_groups++;
        out->n_total += m;
        weighted_sum += (double)m * group_means[k];
    }
    double grand = out->n_total > 0 ? weighted_sum / (double)out->n_total : NAN;
    for (size_t k = 0; k < n_groups; k++) {
        size_t m = group_sizes[k];
        if (m == 0)
            continue;
        out->ss_between += (double)m * (group_means[k] - grand) * (group_means[k] - grand);
        if (m > 1)
            out->ss_within += (double)(m - 1) * group_variances[k];
    }
    out->df_between = out->n_groups > 0 ? (double)(out->n_groups - 1) : 0.0;
    out->df_within = (double)(out->n_total - out->n_groups);
    anova_finish(out);
    return SL_OK;
}

/* ---- Pooling --------------------------------------------------------------- */

static int all_positive_finite(const double *x, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!(isfinite(x[i]) && x[i] > 0.0))
            return 0;
    return 1;
}

sl_status sl_stats_pool_inverse_variance(sl_stats_pooled *out, const double *est,
                                         const double *se, size_t k)
{
    if (k == 0 || !est || !se || !all_finite(est, k) || !all_positive_finite(se, k))
        return SL_EINPUT;
    double *w = malloc(k * sizeof *w);
    if (!w)
        return SL_ENOMEM;
    double sum_w = 0.0;
    for (size_t i = 0; i < k; i++) {
        w[i] = 1.0 / (se[i] * se[i]);
        sum_w += w[i];
    }
    out->k = k;
    out->value = gsl_stats_wmean(w, 1, est, 1, k);
    out->se = 1.0 / sqrt(sum_w);
    out->q = gsl_stats_wtss_m(w, 1, est, 1, k, out->value);
    out->df = (double)(k - 1);
    out->p = k > 1 ? gsl_cdf_chisq_Q(out->q, out->df) : NAN;
    out->tau = 0.0;
    free(w);
    return SL_OK;
}

/* ---- Individuals control chart -------------------------------------------- */

static double mean_moving_range(const double *x, size_t n)
{
    double sum = 0.0;
    for (size_t i = 1; i < n; i++)
        sum += fabs(x[i] - x[i - 1]);
    return sum / (double)(n - 1);
}

static int chart_flag(const sl_stats_ichart *c, double v)
{
    if (v > c->ucl)
        return 1;
    if (v < c->lcl)
        return -1;
    return 0;
}

sl_status sl_stats_individuals_chart(sl_stats_ichart *out, int *flags, const double *x,
                                     size_t n)
{
    if (n == 0 || !x || !all_finite(x, n))
        return SL_EINPUT;
    out->n = n;
    out->n_outside = 0;
    out->center = gsl_stats_mean(x, 1, n);
    if (n == 1) {
        out->mr_bar = out->sigma = out->lcl = out->ucl = NAN;
    } else {
        out->mr_bar = mean_moving_range(x, n);
        out->sigma = out->mr_bar / SL_STATS_D2_N2;
        out->lcl = out->center - SL_STATS_CHART_SIGMAS * out->sigma;
        out->ucl = out->center + SL_STATS_CHART_SIGMAS * out->sigma;
    }
    for (size_t i = 0; i < n; i++) {
        int flag = n > 1 ? chart_flag(out, x[i]) : 0;
        out->n_outside += flag != 0;
        if (flags)
            flags[i] = flag;
    }
    return SL_OK;
}
