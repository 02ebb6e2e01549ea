/* SPDX-License-Identifier: MIT
 * Statistics for split-lot analysis: robust outlier scores, sample summaries,
 * t and normal quantiles, main-effects least squares, one-way ANOVA, pooling
 * of estimates across lots, the individuals control chart, the noncentral t,
 * verdicts against a plan, their power, and wafer-level GLS of effects.
 * Numbers in, numbers out: no I/O, no knowledge of plans, lots or databases.
 * Heavy lifting is done by GSL; call sl_physics_init() (GSL errors off) first.
 */
#ifndef SPLITLOT_STATS_H
#define SPLITLOT_STATS_H

#include <stddef.h>

#include "splitlot/error.h"

/* |M| above this flags an outlier (Iglewicz and Hoaglin, 1993). */
#define SL_STATS_MODIFIED_Z_THRESHOLD 3.5
/* 0.6745 = Phi^-1(0.75): makes MAD comparable to sigma for normal data
 * (Iglewicz and Hoaglin, 1993). */
#define SL_STATS_MAD_FACTOR 0.6745
/* sqrt(pi/2) = 1.253314: mean absolute deviation to sigma for normal data,
 * the scale used when MAD = 0. */
#define SL_STATS_MEANAD_FACTOR 1.253314
/* d2 for moving ranges of two points (Montgomery, Introduction to Statistical
 * Quality Control, Appendix table of control chart factors). */
#define SL_STATS_D2_N2 1.128
/* Width of individuals chart limits in sigma (Montgomery). */
#define SL_STATS_CHART_SIGMAS 3.0
/* Relative singular value below which a design column counts as dependent. */
#define SL_STATS_RANK_TOL 1e-10
/* Most loads a GLS over several batched steps takes (its dense block of the
 * loads grows as their square). */
#define SL_STATS_MAX_DENSE_LOADS 1024
/* Most coefficients a wafer-level fit takes. */
#define SL_STATS_MAX_COEF 64
/* sl_stats_column.factor of the intercept column. */
#define SL_STATS_INTERCEPT ((size_t)-1)

/* ---- Robust location, scale and outlier score ----------------------------- */

/* Median and scales of a sample, and the denominator of its modified z-score. */
typedef struct {
    size_t n;
    double median;
    double mad;      /* median |x_i - median|, unscaled */
    double mean_ad;  /* mean |x_i - median| */
    double scale;    /* denominator of M: MAD / 0.6745; 1.253314 * mean_ad when
                        MAD = 0; 0 when every value equals the median */
} sl_stats_robust;

/* Median of x[0..n-1] (mean of the two middle values for even n), via a
 * sorted copy (gsl_sort, gsl_stats_median_from_sorted_data); x is not changed.
 * scratch holds n doubles, or is NULL to allocate. Values must be finite.
 * Returns SL_OK, SL_EINPUT for n = 0 or a non-finite value, SL_ENOMEM. */
sl_status sl_stats_median(double *median, const double *x, size_t n, double *scratch);

/* Median, MAD = median |x_i - median| (unscaled), mean absolute deviation
 * about the median (gsl_stats_absdev_m), and the scale of the modified
 * z-score. When MAD = 0 (half or more of the values are equal) the scale
 * falls back to 1.253314 * mean_ad, so M = (x - median) / (1.253314 mean_ad),
 * the practice that goes with Iglewicz and Hoaglin (1993); when every value
 * equals the median the scale is 0 and every M is 0.
 * scratch as in sl_stats_median. Returns SL_OK, SL_EINPUT, SL_ENOMEM. */
sl_status sl_stats_robust_scale(sl_stats_robust *out, const double *x, size_t n,
                                double *scratch);

/* The same from a median, MAD and mean absolute deviation about the median
 * found elsewhere (e.g. by sl_stats_median_search over a sample too large to
 * hold): sets n, the three and the scale exactly as sl_stats_robust_scale. */
void sl_stats_robust_from(sl_stats_robust *out, size_t n, double median, double mad,
                          double mean_ad);

/* Modified z-score of one value: M = 0.6745 (x - median) / MAD
 * = (x - median) / scale (Iglewicz and Hoaglin, 1993); 0 when scale = 0. */
double sl_stats_modified_z_of(const sl_stats_robust *robust, double x);

/* Modified z-score M_i of every value into z[0..n-1] (z may not alias x);
 * robust (may be NULL) receives the median and scales used. Flag a value
 * when fabs(M_i) > SL_STATS_MODIFIED_Z_THRESHOLD.
 * Returns SL_OK, SL_EINPUT (n = 0, non-finite value), SL_ENOMEM. */
sl_status sl_stats_modified_z(double *z, sl_stats_robust *robust, const double *x,
                              size_t n, double *scratch);

/* ---- Sample summary -------------------------------------------------------- */

typedef struct {
    size_t n;
    double mean;
    double sd;        /* sample SD with n - 1 (gsl_stats_sd) */
    double se;        /* sd / sqrt(n) */
    double level;     /* confidence level of the interval, e.g. 0.95 */
    double t_crit;    /* t_{(1 + level)/2, n - 1} */
    double ci_low, ci_high; /* mean -/+ t_crit * se */
} sl_stats_summary;

/* Mean, SD (n - 1), standard error and the two-sided Student t confidence
 * interval mean +/- t_{(1+level)/2, n-1} s / sqrt(n) at level in (0, 1).
 * For n = 1: mean = x[0] and sd, se, t_crit, ci_low, ci_high are NaN.
 * Returns SL_OK, SL_EINPUT for n = 0, a non-finite value or a bad level. */
sl_status sl_stats_summarize(sl_stats_summary *out, const double *x, size_t n, double level);

/* The same from the moments of a sample: its size n, mean and sample SD with
 * n - 1 (e.g. gsl_rstat_mean and gsl_rstat_sd of a running accumulator); sd
 * is ignored for n = 1. Returns SL_OK, SL_EINPUT for n = 0, a non-finite mean,
 * a non-finite or negative sd (n > 1) or a bad level. */
sl_status sl_stats_summarize_moments(sl_stats_summary *out, size_t n, double mean, double sd,
                                     double level);

/* ---- Exact median in passes over a sample ---------------------------------- */

/* Bins of the histogram a median search keeps between passes, and the most
 * values it holds for its last pass: its memory is fixed, whatever n. */
#define SL_STATS_MEDIAN_BINS 512
#define SL_STATS_MEDIAN_HELD 2048

typedef struct sl_stats_median_search sl_stats_median_search;

/* The exact median of n values, all in [lo, hi], that are read again in
 * passes instead of held (rows of a database, say): the same number that
 * sl_stats_median gives, without the sample in memory. Each pass counts the
 * values still in question into SL_STATS_MEDIAN_BINS bins over their range
 * and keeps only the bin that holds the middle rank(s), with that bin's
 * smallest and largest value as the next range; once at most
 * SL_STATS_MEDIAN_HELD values remain, the next pass keeps them, and sorting
 * them (gsl_sort) gives the middle one or two, the median of which
 * (gsl_stats_median_from_sorted_data) is returned. Typical data takes two
 * passes, and every pass after the first shrinks the values in question.
 * Use: sl_stats_median_search_new; then while not done, give every value of
 * the sample, in any order, to sl_stats_median_search_add and finish the
 * pass with sl_stats_median_search_end_pass. The sample must be the same in
 * every pass. Returns SL_OK, SL_EINPUT (n = 0, lo > hi or a bound not
 * finite), SL_ENOMEM. Free with sl_stats_median_search_free. */
sl_status sl_stats_median_search_new(sl_stats_median_search **out, size_t n, double lo,
                                     double hi);

/* One value of the current pass (values outside the range in question are
 * passed over; a NaN is counted nowhere, so the pass will not add up). */
void sl_stats_median_search_add(sl_stats_median_search *search, double x);

/* Finish a pass: *done = 1 with *median set when the median is known, else
 * *done = 0 and another pass is needed. Returns SL_OK, SL_EINPUT when the
 * pass did not see the values the earlier ones counted (the sample changed
 * between passes, or held values outside [lo, hi] or NaN), SL_ENOMEM. */
sl_status sl_stats_median_search_end_pass(sl_stats_median_search *search, int *done,
                                          double *median);

/* 1 once the median is known. */
int sl_stats_median_search_done(const sl_stats_median_search *search);

void sl_stats_median_search_free(sl_stats_median_search *search);

/* ---- Distributions --------------------------------------------------------- */

/* Quantile of Student t with df > 0 degrees of freedom at probability p in
 * (0, 1) (gsl_cdf_tdist_Pinv); NaN outside the domain. */
double sl_stats_t_quantile(double p, double df);

/* Quantile of the standard normal at p in (0, 1) (gsl_cdf_ugaussian_Pinv);
 * NaN outside the domain. */
double sl_stats_normal_quantile(double p);

/* Two-sided p-value 2 Q(|t|) of a t statistic with df > 0 (gsl_cdf_tdist_Q);
 * NaN for a NaN t or df <= 0. */
double sl_stats_t_p_two_sided(double t, double df);

/* Two-sided p-value 2 Q(|z|) of a standard normal z (gsl_cdf_ugaussian_Q). */
double sl_stats_z_p_two_sided(double z);

/* ---- Linear least squares for main-effects models ------------------------- */

/* What a design column stands for: factor index and level (the level whose
 * difference from level 0 the coefficient estimates). The intercept column has
 * factor = SL_STATS_INTERCEPT and level 0. */
typedef struct {
    size_t factor;
    size_t level;
} sl_stats_column;

/* A design matrix, row-major n_obs x n_coef, with what each column means. */
typedef struct {
    size_t n_obs;
    size_t n_coef;
    double *x;                /* x[obs * n_coef + col] */
    sl_stats_column *columns; /* n_coef entries */
} sl_stats_design;

/* Treatment-coded (reference level 0) main-effects design: column 0 is the
 * intercept (all 1), then for each factor f in order the levels 1 ..
 * n_levels[f] - 1, column = 1 where levels[obs * n_factors + f] is that level.
 * A factor with one level adds no column. The intercept estimates the mean of
 * the all-reference cell, each other coefficient its level's difference from
 * the factor's level 0. Free with sl_stats_design_free.
 * Returns SL_OK, SL_EINPUT (n_obs = 0, n_levels[f] = 0, a level out of range;
 * the message in diag, which may be NULL), SL_ENOMEM. */
sl_status sl_stats_design_treatment(sl_stats_design **out, const size_t *levels,
                                    size_t n_obs, size_t n_factors,
                                    const size_t *n_levels, sl_diag *diag);

void sl_stats_design_free(sl_stats_design *design);

/* Result of a linear least-squares fit y = X b. */
typedef struct {
    size_t n_obs;
    size_t n_coef;
    double *coef;      /* b, n_coef */
    double *se;        /* standard error of each b, sqrt(diag(cov)) */
    double *cov;       /* covariance of b, n_coef x n_coef row-major */
    double chi2;       /* sum w_i r_i^2 (w_i = 1 unweighted) */
    double resid_var;  /* chi2 / df_resid; NaN when df_resid = 0 */
    size_t df_resid;   /* n_obs - n_coef */
    double r_squared;  /* 1 - chi2 / sum w_i (y_i - ybar_w)^2; NaN when y is constant */
} sl_stats_fit;

/* Least squares b = argmin sum w_i (y_i - x_i b)^2 for X (n_obs x n_coef,
 * row-major, caller's coding, include an intercept column for R^2 to mean
 * anything) and y; w = NULL for the ordinary (unweighted) fit.
 * Unweighted: gsl_multifit_linear, cov = s^2 (X'X)^-1, s^2 = chi2 / (n - p).
 * Weighted: gsl_multifit_wlinear, with the weights read as *relative*
 * precisions (e.g. usable devices behind each wafer mean, Var(y_i) = s^2 / w_i
 * with s^2 unknown): cov = s^2 (X'WX)^-1, s^2 = chi2_w / (n - p), so the
 * standard errors do not change when all weights are multiplied by a constant.
 * Weights must be finite and > 0. With n = p the fit is exact: coefficients
 * are returned, resid_var, se and cov are NaN.
 * The rank of X is checked first (singular values of the column-balanced X,
 * gsl_multifit_linear_svd and gsl_multifit_linear_rank with tolerance
 * SL_STATS_RANK_TOL); a rank-deficient design is SL_EINPUT with diag naming
 * the first column that is a linear combination of the columns before it.
 * Returns SL_OK, SL_EINPUT (n_obs < n_coef, n_coef = 0, non-finite data, bad
 * weight, rank deficiency), SL_ENUM (GSL failure), SL_ENOMEM.
 * Free with sl_stats_fit_free. */
sl_status sl_stats_linear_fit(sl_stats_fit **out, const double *x, const double *y,
                              const double *w, size_t n_obs, size_t n_coef,
                              sl_diag *diag);

void sl_stats_fit_free(sl_stats_fit *fit);

/* ---- One-way analysis of variance ----------------------------------------- */

typedef struct {
    size_t n_groups;     /* non-empty groups */
    size_t n_total;      /* observations */
    double df_between;   /* n_groups - 1 */
    double df_within;    /* n_total - n_groups */
    double ss_between;   /* sum n_k (mean_k - grand mean)^2 */
    double ss_within;    /* sum over groups of sum (x - mean_k)^2 */
    double ms_between;   /* ss_between / df_between */
    double ms_within;    /* ss_within / df_within */
    double f;            /* ms_between / ms_within */
    double p;            /* Q_F(f; df_between, df_within) (gsl_cdf_fdist_Q) */
} sl_stats_anova;

/* One-way ANOVA F test of equal group means (Fisher; any textbook, e.g.
 * Montgomery, Design and Analysis of Experiments). x holds the groups one after
 * the other, group k has group_sizes[k] values. group_means (n_groups entries,
 * may be NULL) receives each group's mean, NaN for an empty group; empty groups
 * are left out of every count. A group of one value adds to the between-groups
 * sum and nothing to the within-groups sum.
 * With fewer than two non-empty groups or df_within = 0, every field from
 * ms_between on that cannot be formed is NaN (f and p always NaN then).
 * When ms_within = 0: f = +inf and p = 0 if ms_between > 0, NaN if both are 0.
 * group_sizes may be NULL only when n_groups = 0. Computed from each group's
 * mean and variance (gsl_stats_mean, gsl_stats_variance_m) by
 * sl_stats_anova_moments.
 * Returns SL_OK, SL_EINPUT for a non-finite value or NULL data with values,
 * SL_ENOMEM. */
sl_status sl_stats_anova_oneway(sl_stats_anova *out, double *group_means,
                                const double *x, const size_t *group_sizes,
                                size_t n_groups);

/* The same test from each group's size, mean and sample variance (n_k - 1;
 * ignored for groups of one), e.g. running accumulators (gsl_rstat) of
 * samples too large to hold: grand mean = sum n_k mean_k / N, ss_between =
 * sum n_k (mean_k - grand)^2, ss_within = sum (n_k - 1) var_k; degenerate
 * cases as sl_stats_anova_oneway. Returns SL_OK, SL_EINPUT for a non-finite
 * mean or a non-finite or negative variance of a group with values. */
sl_status sl_stats_anova_moments(sl_stats_anova *out, const size_t *group_sizes,
                                 const double *group_means, const double *group_variances,
                                 size_t n_groups);

/* ---- Pooling estimates ----------------------------------------------------- */

typedef struct {
    size_t k;
    double value;  /* sum w_i e_i / sum w_i, w_i = 1 / (se_i^2 + tau^2) */
    double se;     /* 1 / sqrt(sum w_i) */
    double q;      /* Cochran's Q = sum (e_i - fixed)^2 / se_i^2 about the
                      fixed-effect (tau = 0) pooled value */
    double df;     /* k - 1 */
    double p;      /* chi-square upper tail of q with df (gsl_cdf_chisq_Q); NaN for k = 1 */
    double tau;    /* between-estimate SD: 0 for the fixed-effect pool; NaN
                      for a random-effects pool of one estimate */
} sl_stats_pooled;

/* Fixed-effect inverse-variance pooled estimate of k estimates e_i with
 * standard errors se_i, and Cochran's Q test of their homogeneity
 * (Cochran, Biometrics 10, 101 (1954)); a small p says the estimates differ
 * by more than their errors, so the pooled SE is too optimistic.
 * Returns SL_OK, SL_EINPUT for k = 0, a non-finite estimate or se_i <= 0. */
sl_status sl_stats_pool_inverse_variance(sl_stats_pooled *out, const double *est,
                                         const double *se, size_t k);

/* Random-effects pooled estimate (DerSimonian and Laird, Controlled Clinical
 * Trials 7, 177 (1986)): with w_i = 1/se_i^2, Q about the fixed-effect mean,
 * tau^2 = max(0, (Q - (k - 1)) / (sum w_i - sum w_i^2 / sum w_i)), then
 * w*_i = 1/(se_i^2 + tau^2), value = sum w*_i e_i / sum w*_i and
 * se = 1/sqrt(sum w*_i), which includes tau. One estimate: tau NaN (no
 * between-estimate spread can be seen), value and se those of the estimate.
 * Returns SL_OK, SL_EINPUT as sl_stats_pool_inverse_variance. */
sl_status sl_stats_pool_random_effects(sl_stats_pooled *out, const double *est,
                                       const double *se, size_t k);

/* ---- Wafer means: variance components, censoring ------------------------ */

/* Weighted least squares of unit means (wafer means) y on X with variance
 * components: Var(y_i) = sigma_u^2 + v_i, v_i the known sampling variance of
 * the mean of unit i (device variance / devices behind it), sigma_u^2 the
 * unit-to-unit variance estimated by moments from the ordinary least-squares
 * residuals: E[RSS] = sum (1 - h_ii)(sigma_u^2 + v_i), so sigma_u^2 =
 * max(0, (RSS - sum (1 - h_ii) v_i) / (n - p)) (h_ii the hat diagonal;
 * Searle, Casella and McCulloch, Variance Components (1992), the ANOVA
 * method). The fit then takes weights 1/(sigma_u^2 + v_i) as relative
 * precisions (sl_stats_linear_fit), so its SEs carry the residual variance
 * and df_resid = n - p is the df of a t interval. v = NULL or all v_i = 0
 * gives the ordinary fit. *unit_var gets sigma_u^2 (NaN when n = p).
 * Returns as sl_stats_linear_fit; SL_EINPUT also for a negative or
 * non-finite v_i. */
sl_status sl_stats_fit_components(sl_stats_fit **out, double *unit_var, const double *x,
                                  const double *y, const double *v, size_t n_obs,
                                  size_t n_coef, sl_diag *diag);

/* Maximum-likelihood mean of a normal sample with known sigma > 0, some of
 * whose values are censored: n values seen, with mean xbar; n_above values
 * known only to lie above `above`, n_below only below `below` (Tobin,
 * Econometrica 26, 24 (1958); Cohen, Truncated and Censored Samples (1991)).
 * Minimises -log L = n (xbar - mu)^2 / (2 sigma^2)
 *   - n_above log Q((above - mu)/sigma) - n_below log P((below - mu)/sigma)
 * with GSL's Brent minimiser (gsl_min_fminimizer_brent) inside a bracket
 * that must hold the minimum (log Q by gsl_sf_log_erfc), to |step| <
 * 1e-6 sigma. *se gets 1/sqrt(observed information) (may be NULL).
 * Without censored values the result is xbar exactly, se sigma/sqrt(n).
 * Returns SL_OK; SL_EINPUT for sigma <= 0, a value not finite, or n = 0
 * (with censored values on one side only the likelihood has no maximum);
 * SL_ENUM when the minimiser fails. */
sl_status sl_stats_censored_mean(double *mean, double *se, size_t n, double xbar, double sigma,
                                 size_t n_above, double above, size_t n_below, double below);

/* ---- Verdict of a level against its plan (src/stats_verdict.c) ------------ */

/* Verdict of a level against its plan (equivalence logic), from the
 * difference d = estimate - planned, its standard error se, df and the
 * tolerance T > 0, with the two-sided (1 - alpha) interval d +/- t se,
 * t = t_{1-alpha/2, df}:
 *   AS_PLANNED   the interval lies inside [-T, T]
 *   OFF_PLAN     the interval lies entirely outside [-T, T]
 *   DIFFERS      the interval excludes 0 but is neither of those
 *   INCONCLUSIVE otherwise, or without df (df < 1) or a finite se. */
typedef enum {
    SL_VERDICT_INCONCLUSIVE = 0,
    SL_VERDICT_AS_PLANNED,
    SL_VERDICT_OFF_PLAN,
    SL_VERDICT_DIFFERS
} sl_stats_verdict_kind;

sl_stats_verdict_kind sl_stats_verdict(double d, double se, double df, double tolerance,
                                       double alpha);

/* "as-planned", "off-plan", "differs", "inconclusive". */
const char *sl_stats_verdict_name(sl_stats_verdict_kind verdict);

/* ---- Individuals control chart -------------------------------------------- */

typedef struct {
    size_t n;
    double center;  /* mean of the values */
    double mr_bar;  /* mean of |x_i - x_{i-1}|, i = 1 .. n-1 */
    double sigma;   /* mr_bar / d2, d2 = 1.128 */
    double lcl, ucl; /* center -/+ 3 sigma */
    size_t n_outside; /* points beyond a limit */
} sl_stats_ichart;

/* Individuals (X) chart with moving-range sigma (Montgomery, Introduction to
 * Statistical Quality Control): center = mean, sigma = MR-bar / 1.128,
 * limits center -/+ 3 sigma. flags (n entries, may be NULL) gets +1 above the
 * upper limit, -1 below the lower, 0 inside or on a limit.
 * One point: center = x[0], mr_bar, sigma and limits NaN, nothing flagged.
 * Returns SL_OK, SL_EINPUT for n = 0 or a non-finite value. */
sl_status sl_stats_individuals_chart(sl_stats_ichart *out, int *flags, const double *x,
                                     size_t n);

/* ---- Noncentral t and power (src/stats_power.c) ----------------------------- */

/* Survival function P[T' > t] of the noncentral t with df > 0 degrees of
 * freedom and noncentrality nc: T' = (Z + nc) / sqrt(V / df), Z standard
 * normal, V chi-square with df. GSL has no noncentral t; this integrates
 * P[Z > t sqrt(v/df) - nc] against the chi-square density of v over
 * df +/- 40 standard deviations (gsl_integration_qags, gsl_cdf_ugaussian_Q,
 * gsl_ran_chisq_pdf), absolute error below 1e-10. NaN for df <= 0 or a NaN
 * argument. */
double sl_stats_nct_sf(double t, double df, double nc);

/* Distribution function P[T' <= t] = 1 - sl_stats_nct_sf(t, df, nc). */
double sl_stats_nct_cdf(double t, double df, double nc);

/* Probability that sl_stats_verdict says OFF_PLAN for a level whose true
 * difference from plan is tolerance + shift, when its estimate is normal with
 * standard error se and se is estimated with df degrees of freedom:
 *   P[t'(df, shift/se) > t_{1-alpha/2,df}] + P[t'(df, (2T+shift)/se) < -t_{1-alpha/2,df}]
 * (the second term, the interval beyond -T, is tiny). 0 for df < 1; NaN for
 * se <= 0, tolerance < 0, shift < 0 or alpha outside (0, 1). */
double sl_stats_offplan_power(double se, double df, double tolerance, double shift,
                              double alpha);

/* The same for a level exactly as planned (true difference 0): the rate of a
 * false off-plan verdict, 2 P[t'(df, -T/se) > t_{1-alpha/2,df}]. */
double sl_stats_offplan_false_rate(double se, double df, double tolerance, double alpha);

/* ---- Generalised least squares of wafer means ------------------------------ */

/* The variance model of n_obs wafer means in a linear model y = X b + e:
 * Var(y) = V = diag(var) + load_var Z Z^T, var[i] the wafer's own variance
 * (wafer scatter plus its devices' scatter / devices), Z (n_obs x n_loads,
 * 0/1) the loads each wafer went through, given as load[i * n_steps + s]:
 * the index (0 .. n_loads - 1) of wafer i's load in batched step s, or -1
 * when the wafer skips that step; load_var the variance of a load's offset. */
typedef struct {
    size_t n_obs, n_coef, n_loads, n_steps;
    const double *x;   /* n_obs x n_coef row-major */
    const double *var; /* n_obs, > 0 */
    const long *load;  /* n_obs x n_steps, or NULL when n_loads = 0 */
    double load_var;   /* >= 0 */
} sl_stats_gls_model;

/* Covariance of the GLS estimate, cov = (X^T V^-1 X)^-1 (n_coef x n_coef,
 * row-major, caller's array), V^-1 by the Woodbury identity so the cost is
 * linear in n_obs (gsl_linalg_cholesky_decomp1, gsl_linalg_cholesky_invert;
 * with one batched step the loads' block is diagonal and needs neither).
 * Returns SL_OK, SL_EINPUT (bad sizes or variances, more than
 * SL_STATS_MAX_DENSE_LOADS loads over several steps), SL_ENUM (X^T V^-1 X is
 * singular: a coefficient the design cannot estimate), SL_ENOMEM. */
sl_status sl_stats_gls_cov(double *cov, const sl_stats_gls_model *model);

/* Residual df of each coefficient: n_obs - n_coef, except for a coefficient
 * whose column is constant within every load and non-zero in some load of
 * two or more wafers (a batched step's level: the load is its unit); it gets
 * units - n_coef with every load counted once and every wafer outside loads
 * once. df (n_coef entries) may come out <= 0: no interval then. */
void sl_stats_coef_df(double *df, const sl_stats_gls_model *model);

/* Wafer-level data of a measured lot for sl_stats_wafer_effects. */
typedef struct {
    size_t n_wafers, n_coef, n_loads, n_steps;
    const double *x;             /* design, n_wafers x n_coef row-major */
    const double *mean;          /* wafer mean of its devices' doping, cm^-2 */
    const double *var;           /* its known sampling variance (device scatter /
                                    devices behind it), cm^-4, >= 0 */
    const long *load;            /* loads as in sl_stats_gls_model, or NULL */
} sl_stats_wafer_data;

/* Effects estimated from wafer means (the wafer, or the load, as the unit). */
typedef struct {
    size_t n_coef;
    double coef[SL_STATS_MAX_COEF];
    double se[SL_STATS_MAX_COEF];
    double df[SL_STATS_MAX_COEF];   /* sl_stats_coef_df */
    double wafer_sigma_per_cm2;     /* estimated, >= 0 */
    double load_sigma_per_cm2;      /* estimated, 0 without loads */
} sl_stats_wafer_fit;

/* Main effects from wafer means, the analysis of a lot as the planner
 * assumes it. Without loads: sl_stats_fit_components (wafer variance by
 * moments, weights 1/(sigma_w^2 + v_i), scale from the residuals, n - p df).
 * With loads: the wafer and load variance components by restricted maximum
 * likelihood (Patterson and Thompson, Biometrika 58, 545 (1971); GSL
 * minimisers), then generalised least squares with V = diag(sigma_w^2 + v_i)
 * + sigma_b^2 Z Z^T as relative weights and the scale from the residuals;
 * df per coefficient by sl_stats_coef_df. Balanced data without loads give
 * exactly the classical t-test. Needs n_wafers > n_coef and n_coef <=
 * SL_STATS_MAX_COEF. Returns SL_OK, SL_EINPUT (sizes, non-finite data),
 * SL_ENUM (singular design or a minimiser failure), SL_ENOMEM. */
sl_status sl_stats_wafer_effects(sl_stats_wafer_fit *out, const sl_stats_wafer_data *data);

#endif
