/* SPDX-License-Identifier: MIT
 * Unit tests of the statistics module (src/stats.c, src/stats_median.c,
 * src/stats_wafer_means.c, src/stats_verdict.c)
 * against SciPy 1.10.1 and NumPy 1.24.2 (each call written beside its value),
 * Iglewicz and Hoaglin's modified z-score, hand arithmetic for the
 * individuals chart, and the median found in passes against GSL's median of
 * a sorted copy.
 * Data sets are made up but typical: neutrality voltages in V, dopings in 1e12 cm^-2.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_statistics_double.h>

#include "splitlot/stats.h"
#include "test_support.h"

#define N_OF(a) (sizeof(a) / sizeof((a)[0]))

static void check_near(const char *what, double got, double want, double tol)
{
    ck_assert_msg(fabs(got - want) <= tol, "%s = %.17g, expected %.17g (tol %g)", what, got,
                  want, tol);
}

static void check_array_near(const char *what, const double *got, const double *want,
                             size_t n, double tol)
{
    for (size_t i = 0; i < n; i++)
        ck_assert_msg(fabs(got[i] - want[i]) <= tol, "%s[%zu] = %.17g, expected %.17g", what,
                      i, got[i], want[i]);
}

/* ---- Robust location, scale and modified z-score -------------------------- */

/* Nine devices of one split, V_cnp in V, one of them far off. */
static const double vcnp9[] = { 1.82, 2.05, 1.97, 2.11, 1.89, 2.02, 3.95, 1.94, 2.08 };

START_TEST(test_median_mad_odd)
{
    double copy[N_OF(vcnp9)], scratch[N_OF(vcnp9)], z[N_OF(vcnp9)];
    memcpy(copy, vcnp9, sizeof copy);
    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_robust_scale(&r, vcnp9, N_OF(vcnp9), scratch), SL_OK);
    ck_assert_uint_eq(r.n, 9);
    check_near("median", r.median, 2.02, 1e-15);       /* numpy.median(x) */
    check_near("mad", r.mad, 0.08000000000000007, 1e-15); /* scipy.stats.median_abs_deviation(x, scale=1.0) */
    check_near("mean_ad", r.mean_ad, 0.28555555555555556, 1e-15); /* numpy.mean(numpy.abs(x - numpy.median(x))) */
    check_near("scale", r.scale, 0.08 / 0.6745, 1e-14);
    ck_assert_mem_eq(copy, vcnp9, sizeof copy); /* the caller's array is untouched */

    /* 0.6745 * (x - numpy.median(x)) / scipy.stats.median_abs_deviation(x, scale=1.0) */
    static const double want[] = { -1.686249999999998, 0.2529374999999981, -0.42156250000000006,
                                   0.7588124999999981, -1.0960625000000002, 0.0,
                                   16.272312499999988, -0.6745, 0.505875 };
    ck_assert_int_eq(sl_stats_modified_z(z, NULL, vcnp9, N_OF(vcnp9), NULL), SL_OK);
    check_array_near("M", z, want, N_OF(want), 1e-12);
    for (size_t i = 0; i < N_OF(z); i++) /* only the 3.95 V device exceeds 3.5 */
        ck_assert_int_eq(fabs(z[i]) > SL_STATS_MODIFIED_Z_THRESHOLD, i == 6);
}
END_TEST

START_TEST(test_median_even_count)
{
    /* Dirac points of a p-doped split, V; even n takes the mean of the middle two. */
    static const double x[] = { -0.42, -0.31, -0.55, -0.38, -0.47, -0.29, -0.36, -0.51 };
    double med, scratch[N_OF(x)];
    ck_assert_int_eq(sl_stats_median(&med, x, N_OF(x), scratch), SL_OK);
    check_near("median", med, -0.4, 1e-15); /* numpy.median(x) */
    ck_assert_int_eq(sl_stats_median(&med, x, N_OF(x), NULL), SL_OK);
    check_near("median (own buffer)", med, -0.4, 1e-15); /* numpy.median(x) */
    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_robust_scale(&r, x, N_OF(x), NULL), SL_OK);
    check_near("mad", r.mad, 0.07999999999999999, 1e-15); /* scipy.stats.median_abs_deviation(x, scale=1.0) */
}
END_TEST

START_TEST(test_mad_zero_falls_back_to_mean_ad)
{
    /* Five of seven devices read the same voltage: MAD = 0. */
    static const double x[] = { 0.50, 0.50, 0.50, 0.50, 0.62, 0.41, 0.50 };
    /* (x - numpy.median(x)) / (1.253314 * numpy.mean(numpy.abs(x - numpy.median(x)))) */
    static const double want[] = { 0.0, 0.0, 0.0, 0.0, 3.1915385928825497, -2.3936539446619127, 0.0 };
    double z[N_OF(x)];
    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_modified_z(z, &r, x, N_OF(x), NULL), SL_OK);
    check_near("mad", r.mad, 0.0, 0.0); /* scipy.stats.median_abs_deviation(x, scale=1.0) */
    check_near("mean_ad", r.mean_ad, 0.030000000000000002, 1e-15); /* numpy.mean(numpy.abs(x - numpy.median(x))) */
    check_near("scale", r.scale, 1.253314 * 0.03, 1e-15);
    check_array_near("M", z, want, N_OF(want), 1e-12);
    ck_assert(isfinite(z[4]) && isfinite(z[5]));
}
END_TEST

START_TEST(test_all_equal_gives_zero_scores)
{
    static const double x[] = { 1.25, 1.25, 1.25, 1.25 };
    double z[N_OF(x)] = { 9.0, 9.0, 9.0, 9.0 };
    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_modified_z(z, &r, x, N_OF(x), NULL), SL_OK);
    ck_assert(r.mad == 0.0 && r.mean_ad == 0.0 && r.scale == 0.0);
    for (size_t i = 0; i < N_OF(z); i++)
        ck_assert(z[i] == 0.0);
    ck_assert(sl_stats_modified_z_of(&r, 1.30) == 0.0);
}
END_TEST

START_TEST(test_robust_bad_input)
{
    const double bad[] = { 1.0, NAN, 2.0 };
    double med = 7.0, z[3];
    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_median(&med, bad, 0, NULL), SL_EINPUT);
    ck_assert_int_eq(sl_stats_median(&med, bad, 3, NULL), SL_EINPUT);
    ck_assert_int_eq(sl_stats_robust_scale(&r, bad, 3, NULL), SL_EINPUT);
    ck_assert_int_eq(sl_stats_modified_z(z, &r, bad, 0, NULL), SL_EINPUT);
    ck_assert(med == 7.0);
}
END_TEST

START_TEST(test_robust_from_parts)
{
    /* the scales of test_median_mad_odd and test_mad_zero_falls_back_to_mean_ad,
     * from their median, MAD and mean absolute deviation */
    sl_stats_robust r;
    sl_stats_robust_from(&r, 9, 2.02, 0.08, 0.28555555555555556);
    ck_assert_uint_eq(r.n, 9);
    check_near("scale", r.scale, 0.08 / 0.6745, 1e-14);
    check_near("M", sl_stats_modified_z_of(&r, 3.95), 16.272312499999988, 1e-12); /* as above */
    sl_stats_robust_from(&r, 7, 0.5, 0.0, 0.030000000000000002);
    check_near("scale", r.scale, 1.253314 * 0.03, 1e-15);
    sl_stats_robust_from(&r, 4, 1.25, 0.0, 0.0);
    ck_assert(r.scale == 0.0 && sl_stats_modified_z_of(&r, 1.30) == 0.0);
}
END_TEST

/* ---- Exact median in passes ------------------------------------------------ */

/* The median of x[0..n) by a search over [lo, hi] fed x in passes; the
 * passes it took in *passes. */
static double median_in_passes(const double *x, size_t n, double lo, double hi, int *passes)
{
    sl_stats_median_search *s = NULL;
    ck_assert_int_eq(sl_stats_median_search_new(&s, n, lo, hi), SL_OK);
    double median = NAN;
    int done = 0;
    for (*passes = 0; !done; ++*passes) {
        ck_assert_int_lt(*passes, 40);
        for (size_t i = 0; i < n; i++)
            sl_stats_median_search_add(s, x[i]);
        ck_assert_int_eq(sl_stats_median_search_end_pass(s, &done, &median), SL_OK);
    }
    ck_assert(sl_stats_median_search_done(s));
    sl_stats_median_search_free(s);
    return median;
}

/* The search against the sorted-copy median (sl_stats_median: gsl_sort and
 * gsl_stats_median_from_sorted_data), value for value, and the MAD likewise
 * (the median of |x - median| over [0, largest distance], as the analysis
 * asks for it). Returns the passes the median took. */
static int check_median_in_passes(const char *what, const double *x, size_t n)
{
    double lo, hi, want, got;
    int passes, mad_passes;
    gsl_stats_minmax(&lo, &hi, x, 1, n);
    ck_assert_int_eq(sl_stats_median(&want, x, n, NULL), SL_OK);
    got = median_in_passes(x, n, lo, hi, &passes);
    ck_assert_msg(got == want, "%s: median %.17g, sorted copy %.17g", what, got, want);

    sl_stats_robust r;
    ck_assert_int_eq(sl_stats_robust_scale(&r, x, n, NULL), SL_OK);
    double *dist = malloc(n * sizeof *dist);
    for (size_t i = 0; i < n; i++)
        dist[i] = fabs(x[i] - got);
    got = median_in_passes(dist, n, 0.0, fmax(fabs(lo - got), fabs(hi - got)), &mad_passes);
    ck_assert_msg(got == r.mad, "%s: MAD %.17g, sorted copy %.17g", what, got, r.mad);
    free(dist);
    return passes;
}

START_TEST(test_median_search_matches_sorting)
{
    static const size_t sizes[] = { 1, 2, 3, 4, 7, SL_STATS_MEDIAN_HELD, SL_STATS_MEDIAN_HELD + 1,
                                    5000, 5001, 40000 };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20261);
    double *x = malloc(40000 * sizeof *x);
    char what[64];
    for (size_t k = 0; k < N_OF(sizes); k++) { /* V_cnp of one split: 8.2 V, 0.6 V spread */
        for (size_t i = 0; i < sizes[k]; i++)
            x[i] = 8.2 + gsl_ran_gaussian(rng, 0.6);
        snprintf(what, sizeof what, "normal, n = %zu", sizes[k]);
        int passes = check_median_in_passes(what, x, sizes[k]);
        /* one pass to hold a small split, two for a large one (by design) */
        ck_assert_int_eq(passes, sizes[k] <= SL_STATS_MEDIAN_HELD ? 1 : 2);
    }
    for (size_t i = 0; i < 10001; i++) /* a meter with 0.1 V steps: many ties */
        x[i] = round(10.0 * gsl_ran_gaussian(rng, 0.3)) / 10.0;
    check_median_in_passes("ties", x, 10001);
    for (size_t i = 0; i < 9999; i++) /* one device far off stretches the range */
        x[i] = gsl_rng_uniform(rng);
    x[9999] = 1e6;
    check_median_in_passes("far outlier", x, 10000);
    for (size_t i = 0; i < 5000; i++) /* values about zero with both zeros among them */
        x[i] = i % 50 == 0 ? (i % 100 == 0 ? 0.0 : -0.0) : gsl_ran_gaussian(rng, 1e-3);
    check_median_in_passes("signed zeros", x, 5000);
    for (size_t i = 0; i < 5000; i++) /* a range wider than the largest double */
        x[i] = i % 2 ? 1e308 * gsl_rng_uniform(rng) : -1e308 * gsl_rng_uniform(rng);
    check_median_in_passes("widest range", x, 5000);
    for (size_t i = 0; i < 3000; i++) /* 1, 1/2, 1/4, ... down to 2^-999: binned by value,
                                          nearly all stay in the lowest bin pass after pass */
        x[i] = ldexp(1.0 + (double)(i % 3) / 4.0, -(int)(i / 3));
    ck_assert_int_le(check_median_in_passes("halving", x, 3000), 4);
    for (size_t i = 0; i < 3000; i++)
        x[i] = 1.25;
    ck_assert_int_eq(check_median_in_passes("all equal", x, 3000), 1);
    free(x);
    gsl_rng_free(rng);
}
END_TEST

START_TEST(test_median_search_bad_input)
{
    sl_stats_median_search *s = NULL;
    ck_assert_int_eq(sl_stats_median_search_new(&s, 0, 0.0, 1.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_median_search_new(&s, 3, 1.0, 0.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_median_search_new(&s, 3, NAN, 1.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_median_search_new(&s, 3, 0.0, INFINITY), SL_EINPUT);
    ck_assert_ptr_null(s);

    /* a pass that does not see the sample the search was told of */
    static const double x[] = { 0.3, 0.1, 0.2 };
    double median = 7.0;
    int done = 1;
    for (int extra = 0; extra < 2; extra++) {
        ck_assert_int_eq(sl_stats_median_search_new(&s, 3, 0.1, 0.3), SL_OK);
        for (size_t i = 0; i < 2; i++)
            sl_stats_median_search_add(s, x[i]);
        if (extra) {
            sl_stats_median_search_add(s, x[2]);
            sl_stats_median_search_add(s, 0.25);
        }
        ck_assert_int_eq(sl_stats_median_search_end_pass(s, &done, &median), SL_EINPUT);
        ck_assert(!done && median == 7.0);
        sl_stats_median_search_free(s);
    }
    /* NaN and values out of range are counted nowhere */
    ck_assert_int_eq(sl_stats_median_search_new(&s, 3, 0.1, 0.3), SL_OK);
    sl_stats_median_search_add(s, NAN);
    sl_stats_median_search_add(s, 0.4);
    for (size_t i = 0; i < 3; i++)
        sl_stats_median_search_add(s, x[i]);
    ck_assert_int_eq(sl_stats_median_search_end_pass(s, &done, &median), SL_OK);
    ck_assert(done && median == 0.2);
    sl_stats_median_search_free(s);
}
END_TEST

/* ---- Sample summary -------------------------------------------------------- */

/* Delivered doping of ten wafers, 1e12 cm^-2. */
static const double doping10[] = { 1.12, 1.35, 0.98, 1.21, 1.40, 1.05, 1.18, 1.27, 1.09, 1.31 };

START_TEST(test_summary_against_scipy)
{
    static const struct { double level, lo, hi; } table[] = {
        /* scipy.stats.t.interval(level, 9, loc=numpy.mean(x), scale=scipy.stats.sem(x)) */
        { 0.95, 1.0979036094730252, 1.2940963905269751 },
        { 0.90, 1.1165087227875212, 1.2754912772124791 },
    };
    for (size_t i = 0; i < N_OF(table); i++) {
        sl_stats_summary s;
        ck_assert_int_eq(sl_stats_summarize(&s, doping10, N_OF(doping10), table[i].level), SL_OK);
        ck_assert_uint_eq(s.n, 10);
        check_near("mean", s.mean, 1.1960000000000002, 1e-14); /* numpy.mean(x) */
        check_near("sd", s.sd, 0.13712929827153802, 1e-14);    /* numpy.std(x, ddof=1) */
        check_near("se", s.se, 0.0433640916478651, 1e-14);     /* scipy.stats.sem(x) */
        check_near("ci_low", s.ci_low, table[i].lo, 1e-10);   /* t quantile to ~1e-9 relative */
        check_near("ci_high", s.ci_high, table[i].hi, 1e-10);
    }
}
END_TEST

START_TEST(test_summary_from_moments)
{
    /* numpy.mean(x), numpy.std(x, ddof=1) of doping10 */
    const double mean = 1.1960000000000002, sd = 0.13712929827153802;
    sl_stats_summary s;
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 10, mean, sd, 0.95), SL_OK);
    check_near("se", s.se, 0.0433640916478651, 1e-14); /* scipy.stats.sem(x) */
    /* scipy.stats.t.interval(0.95, 9, loc=numpy.mean(x), scale=scipy.stats.sem(x)) */
    check_near("ci_low", s.ci_low, 1.0979036094730252, 1e-10);
    check_near("ci_high", s.ci_high, 1.2940963905269751, 1e-10);
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 1, -1.7, NAN, 0.95), SL_OK);
    ck_assert(s.mean == -1.7 && isnan(s.sd) && isnan(s.ci_low));
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 0, mean, sd, 0.95), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 10, NAN, sd, 0.95), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 10, mean, -sd, 0.95), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize_moments(&s, 10, mean, sd, 1.5), SL_EINPUT);
}
END_TEST

START_TEST(test_summary_one_value)
{
    const double x[] = { -1.7 };
    sl_stats_summary s;
    ck_assert_int_eq(sl_stats_summarize(&s, x, 1, 0.95), SL_OK);
    ck_assert_uint_eq(s.n, 1);
    ck_assert(s.mean == -1.7);
    ck_assert(isnan(s.sd) && isnan(s.se) && isnan(s.t_crit));
    ck_assert(isnan(s.ci_low) && isnan(s.ci_high));
}
END_TEST

START_TEST(test_summary_bad_input)
{
    sl_stats_summary s;
    ck_assert_int_eq(sl_stats_summarize(&s, doping10, 0, 0.95), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize(&s, doping10, 10, 1.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize(&s, doping10, 10, 0.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_summarize(&s, doping10, 10, NAN), SL_EINPUT);
}
END_TEST

/* ---- Distributions --------------------------------------------------------- */

START_TEST(test_quantiles_and_p_values)
{
    static const struct { double p, df, want; } tq[] = {
        { 0.975, 9.0, 2.2621571627409915 },   /* scipy.stats.t.ppf(0.975, 9) */
        { 0.995, 3.0, 5.84090929975643 },     /* scipy.stats.t.ppf(0.995, 3) */
        { 0.05, 20.0, -1.7247182429207863 },  /* scipy.stats.t.ppf(0.05, 20) */
        { 0.9, 2.5, 1.730250928807177 },      /* scipy.stats.t.ppf(0.9, 2.5) */
    };
    /* GSL's t inverse agrees with SciPy to a few parts in 1e9. */
    for (size_t i = 0; i < N_OF(tq); i++)
        check_near("t quantile / expected", sl_stats_t_quantile(tq[i].p, tq[i].df) / tq[i].want,
                   1.0, 1e-8);

    static const struct { double p, want; } zq[] = {
        { 0.975, 1.959963984540054 },   /* scipy.stats.norm.ppf(0.975) */
        { 0.1, -1.2815515655446004 },   /* scipy.stats.norm.ppf(0.1) */
        { 0.999, 3.090232306167813 },   /* scipy.stats.norm.ppf(0.999) */
    };
    for (size_t i = 0; i < N_OF(zq); i++)
        check_near("z quantile", sl_stats_normal_quantile(zq[i].p), zq[i].want, 1e-12);

    static const struct { double t, df, want; } tp[] = {
        { 2.3, 12.0, 0.04019757371346055 },  /* 2 * scipy.stats.t.sf(2.3, 12) */
        { -3.1, 4.0, 0.03622111103743912 },  /* 2 * scipy.stats.t.sf(abs(-3.1), 4) */
        { 0.0, 5.0, 1.0 },                   /* 2 * scipy.stats.t.sf(0.0, 5) */
    };
    for (size_t i = 0; i < N_OF(tp); i++)
        check_near("t p-value", sl_stats_t_p_two_sided(tp[i].t, tp[i].df), tp[i].want, 1e-12);
    check_near("z p-value", sl_stats_z_p_two_sided(1.96), 0.04999579029644087, 1e-14); /* 2 * scipy.stats.norm.sf(1.96) */
    check_near("z p-value", sl_stats_z_p_two_sided(-2.5), 0.012419330651552265, 1e-14); /* 2 * scipy.stats.norm.sf(abs(-2.5)) */
}
END_TEST

START_TEST(test_distribution_domain)
{
    ck_assert(isnan(sl_stats_t_quantile(0.0, 5.0)));
    ck_assert(isnan(sl_stats_t_quantile(1.0, 5.0)));
    ck_assert(isnan(sl_stats_t_quantile(0.5, 0.0)));
    ck_assert(isnan(sl_stats_normal_quantile(1.5)));
    ck_assert(isnan(sl_stats_t_p_two_sided(NAN, 5.0)));
    ck_assert(isnan(sl_stats_t_p_two_sided(1.0, -1.0)));
    ck_assert(isnan(sl_stats_z_p_two_sided(NAN)));
}
END_TEST

/* ---- Design matrix and least squares -------------------------------------- */

/* Twelve wafers, two per split: dielectric (ox90, alox20, hBN) x anneal
 * (none, anneal-350); levels[wafer * 2 + factor]. */
static const size_t wafer_levels[] = { 0, 0, 0, 0, 0, 1, 0, 1, 1, 0, 1, 0,
                                       1, 1, 1, 1, 2, 0, 2, 0, 2, 1, 2, 1 };
static const size_t wafer_n_levels[] = { 3, 2 };
/* Wafer-mean delivered doping, 1e12 cm^-2, and usable devices per wafer. */
static const double wafer_doping[] = { -2.05, -1.88, -0.71, -0.93, -1.32, -1.51,
                                       -0.18, 0.05,  -2.61, -2.42, -1.35, -1.20 };
static const double wafer_devices[] = { 31, 28, 34, 30, 25, 33, 29, 35, 32, 27, 30, 26 };

static sl_stats_design *wafer_design(void)
{
    sl_stats_design *d = NULL;
    ck_assert_int_eq(sl_stats_design_treatment(&d, wafer_levels, 12, 2, wafer_n_levels, NULL),
                     SL_OK);
    return d;
}

START_TEST(test_design_treatment_coding)
{
    sl_stats_design *d = wafer_design();
    ck_assert_uint_eq(d->n_obs, 12);
    ck_assert_uint_eq(d->n_coef, 4); /* 1 + (3 - 1) + (2 - 1) */
    /* columns: intercept, dielectric=alox20, dielectric=hBN, anneal=anneal-350 */
    static const sl_stats_column cols[] = { { SL_STATS_INTERCEPT, 0 }, { 0, 1 }, { 0, 2 }, { 1, 1 } };
    for (size_t c = 0; c < 4; c++) {
        ck_assert_uint_eq(d->columns[c].factor, cols[c].factor);
        ck_assert_uint_eq(d->columns[c].level, cols[c].level);
    }
    static const double rows[][4] = {
        { 1, 0, 0, 0 }, { 1, 0, 0, 1 }, { 1, 1, 0, 0 }, { 1, 1, 0, 1 }, { 1, 0, 1, 0 }, { 1, 0, 1, 1 },
    };
    for (size_t split = 0; split < 6; split++) /* both wafers of a split share the row */
        for (size_t w = 0; w < 2; w++)
            check_array_near("row", d->x + (2 * split + w) * 4, rows[split], 4, 0.0);
    sl_stats_design_free(d);
}
END_TEST

START_TEST(test_design_bad_levels)
{
    const size_t levels[] = { 0, 3 };
    const size_t n_levels[] = { 2, 3 };
    const size_t no_levels[] = { 2, 0 };
    sl_stats_design *d = (sl_stats_design *)1;
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(sl_stats_design_treatment(&d, levels, 1, 2, n_levels, diag), SL_EINPUT);
    ck_assert(d == NULL);
    ck_assert_str_eq(sl_diag_last(diag),
                     "observation 0: level 3 of factor 1 is out of range (factor has 3 levels)");
    ck_assert_int_eq(sl_stats_design_treatment(&d, levels, 1, 2, no_levels, diag), SL_EINPUT);
    ck_assert_str_eq(sl_diag_last(diag), "factor 1 has no levels");
    ck_assert_int_eq(sl_stats_design_treatment(&d, levels, 0, 2, n_levels, diag), SL_EINPUT);
    sl_diag_free(diag);
}
END_TEST

START_TEST(test_ols_against_numpy)
{
    sl_stats_design *d = wafer_design();
    sl_stats_fit *fit = NULL;
    ck_assert_int_eq(sl_stats_linear_fit(&fit, d->x, wafer_doping, NULL, 12, 4, NULL), SL_OK);
    /* b, rss = numpy.linalg.lstsq(X, y, rcond=None)[:2] */
    static const double b[] = { -2.0150000000000023, 0.6525000000000016, -0.5024999999999991, 1.245 };
    /* numpy.sqrt(numpy.diag(sigma2 * numpy.linalg.inv(X.T @ X))), sigma2 = rss[0] / (12 - 4) */
    static const double se[] = { 0.07458216945088154, 0.0913441295322256, 0.09134412953222562,
                                 0.07458216945088154 };
    check_array_near("coef", fit->coef, b, 4, 1e-12);
    check_array_near("se", fit->se, se, 4, 1e-12);
    check_near("chi2", fit->chi2, 0.13350000000000023, 1e-12);       /* rss[0] */
    check_near("resid_var", fit->resid_var, 0.01668750000000003, 1e-13); /* rss[0] / (12 - 4) */
    check_near("r2", fit->r_squared, 0.9821204359399327, 1e-12); /* 1 - rss[0] / numpy.sum((y - y.mean())**2) */
    ck_assert_uint_eq(fit->df_resid, 8);
    check_near("cov[0][0]", fit->cov[0], se[0] * se[0], 1e-14);
    sl_stats_fit_free(fit);
    sl_stats_design_free(d);
}
END_TEST

/* Weighted fit of wafer means, weights = usable devices, SEs scaled by the
 * weighted residual variance. With W = numpy.diag(w), sw = numpy.sqrt(w):
 * bw = numpy.linalg.lstsq(X * sw[:, None], y * sw, rcond=None)[0]
 * chi2w = numpy.sum(w * (y - X @ bw)**2) */
START_TEST(test_wls_against_numpy)
{
    static const double bw[] = { -2.0220663235535583, 0.6549830629216886, -0.5082261814242844,
                                 1.257564965579495 };
    /* numpy.sqrt(numpy.diag(chi2w / (12 - 4) * numpy.linalg.inv(X.T @ W @ X))) */
    static const double sew[] = { 0.07579577659742252, 0.09174767109714292, 0.09317269396429079,
                                  0.0757475523686954 };
    static const double scales[] = { 1.0, 10.0, 0.037 }; /* a common factor changes nothing */
    sl_stats_design *d = wafer_design();
    for (size_t s = 0; s < N_OF(scales); s++) {
        double w[12];
        for (size_t i = 0; i < 12; i++)
            w[i] = scales[s] * wafer_devices[i];
        sl_stats_fit *fit = NULL;
        ck_assert_int_eq(sl_stats_linear_fit(&fit, d->x, wafer_doping, w, 12, 4, NULL), SL_OK);
        check_array_near("coef", fit->coef, bw, 4, 1e-12);
        check_array_near("se", fit->se, sew, 4, 1e-12);
        check_near("chi2", fit->chi2 / scales[s], 4.124521369510774, 1e-11); /* chi2w */
        /* 1 - chi2w / numpy.sum(w * (y - numpy.average(y, weights=w))**2) */
        check_near("r2", fit->r_squared, 0.9823292001142802, 1e-12);
        sl_stats_fit_free(fit);
    }
    sl_stats_design_free(d);
}
END_TEST

START_TEST(test_fit_exact_has_no_errors)
{
    /* Two wafers, intercept and one treatment: n = p. */
    const double x[] = { 1, 0, 1, 1 };
    const double y[] = { -1.9, -0.8 };
    sl_stats_fit *fit = NULL;
    ck_assert_int_eq(sl_stats_linear_fit(&fit, x, y, NULL, 2, 2, NULL), SL_OK);
    static const double b[] = { -1.9000000000000001, 1.1000000000000005 }; /* numpy.linalg.lstsq(X, y, rcond=None)[0] */
    check_array_near("coef", fit->coef, b, 2, 1e-13);
    ck_assert_uint_eq(fit->df_resid, 0);
    ck_assert(isnan(fit->resid_var) && isnan(fit->se[0]) && isnan(fit->se[1]));
    sl_stats_fit_free(fit);
}
END_TEST

START_TEST(test_fit_rank_deficient)
{
    /* Anneal only ever given to alox20 wafers: the two factors are confounded. */
    const size_t confounded[] = { 0, 0, 0, 0, 1, 1, 1, 1 };
    const size_t n_levels[] = { 2, 2 };
    const double y[] = { -2.0, -1.9, -0.4, -0.5 };
    sl_diag *diag = sl_diag_new();
    sl_stats_design *d = NULL;
    sl_stats_fit *fit = (sl_stats_fit *)1;
    ck_assert_int_eq(sl_stats_design_treatment(&d, confounded, 4, 2, n_levels, diag), SL_OK);
    ck_assert_int_eq(sl_stats_linear_fit(&fit, d->x, y, NULL, 4, 3, diag), SL_EINPUT);
    ck_assert(fit == NULL);
    ck_assert_str_eq(sl_diag_last(diag), "design matrix is rank deficient (rank 2 of 3 columns): "
                                         "column 2 is a linear combination of the columns before it");
    sl_stats_design_free(d);

    /* A planned level (hBN, level 2) with no wafer measured: an all-zero column. */
    const size_t unobserved[] = { 0, 0, 1, 1 };
    const size_t three[] = { 3 };
    ck_assert_int_eq(sl_stats_design_treatment(&d, unobserved, 4, 1, three, diag), SL_OK);
    ck_assert_int_eq(sl_stats_linear_fit(&fit, d->x, y, NULL, 4, 3, diag), SL_EINPUT);
    ck_assert_str_eq(sl_diag_last(diag), "design matrix is rank deficient (rank 2 of 3 columns): "
                                         "column 2 is a linear combination of the columns before it");
    sl_stats_design_free(d);
    sl_diag_free(diag);
}
END_TEST

START_TEST(test_fit_bad_input)
{
    const double x[] = { 1, 0, 1, 1, 1, 1 };
    const double y[] = { -1.9, -0.8, -0.7 };
    const double w_zero[] = { 30, 0, 28 };
    const double y_nan[] = { -1.9, NAN, -0.7 };
    sl_diag *diag = sl_diag_new();
    sl_stats_fit *fit = NULL;
    ck_assert_int_eq(sl_stats_linear_fit(&fit, x, y, NULL, 1, 2, diag), SL_EINPUT);
    ck_assert_str_eq(sl_diag_last(diag), "1 observations cannot determine 2 coefficients");
    ck_assert_int_eq(sl_stats_linear_fit(&fit, x, y, w_zero, 3, 2, diag), SL_EINPUT);
    ck_assert_str_eq(sl_diag_last(diag), "weight 1 is 0; weights must be finite and positive");
    ck_assert_int_eq(sl_stats_linear_fit(&fit, x, y_nan, NULL, 3, 2, diag), SL_EINPUT);
    ck_assert_int_eq(sl_stats_linear_fit(&fit, x, y, NULL, 3, 0, diag), SL_EINPUT);
    ck_assert(fit == NULL);
    sl_diag_free(diag);
}
END_TEST

/* ---- One-way ANOVA --------------------------------------------------------- */

START_TEST(test_anova_three_splits)
{
    /* V_cnp of three splits: a (5 devices), b (4), c (6), concatenated. */
    static const double x[] = { -0.41, -0.35, -0.52, -0.38, -0.44, 0.12, 0.05, 0.21, 0.09,
                                -1.05, -0.98, -1.12, -0.91, -1.01, -1.08 };
    static const size_t sizes[] = { 5, 4, 6 };
    /* numpy.mean(a), numpy.mean(b), numpy.mean(c) */
    static const double means_want[] = { -0.42000000000000004, 0.1175, -1.0250000000000001 };
    double means[3];
    sl_stats_anova a;
    ck_assert_int_eq(sl_stats_anova_oneway(&a, means, x, sizes, 3), SL_OK);
    check_array_near("group mean", means, means_want, 3, 1e-14);
    ck_assert_uint_eq(a.n_groups, 3);
    ck_assert_uint_eq(a.n_total, 15);
    check_near("df_between", a.df_between, 2.0, 0.0);
    check_near("df_within", a.df_within, 12.0, 0.0);
    check_near("F", a.f, 325.87022448115647, 1e-9);     /* scipy.stats.f_oneway(a, b, c).statistic */
    check_near("p", a.p / 3.492189222754767e-11, 1.0, 1e-8); /* scipy.stats.f_oneway(a, b, c).pvalue */
    /* sum(len(g) * (numpy.mean(g) - numpy.mean(numpy.concatenate([a, b, c])))**2 for g in (a, b, c)) */
    check_near("ss_between", a.ss_between, 3.2057483333333345, 1e-12);
    /* sum(numpy.sum((g - numpy.mean(g))**2) for g in (a, b, c)) */
    check_near("ss_within", a.ss_within, 0.05902500000000002, 1e-14);
}
END_TEST

START_TEST(test_anova_group_of_one_and_empty_group)
{
    /* a and b as above plus a split with a single measured device (-0.20 V). */
    static const double x[] = { -0.41, -0.35, -0.52, -0.38, -0.44, 0.12, 0.05, 0.21, 0.09, -0.20 };
    static const size_t sizes[] = { 5, 4, 1 };
    sl_stats_anova a;
    ck_assert_int_eq(sl_stats_anova_oneway(&a, NULL, x, sizes, 3), SL_OK);
    check_near("F", a.f, 72.81530364372446, 1e-9); /* scipy.stats.f_oneway(a, b, [-0.20]).statistic */
    check_near("p", a.p, 2.065843544389173e-05, 1e-13); /* scipy.stats.f_oneway(a, b, [-0.20]).pvalue */

    /* An empty split between two others is left out. */
    static const double y[] = { 1.02, 0.95, 1.10, 0.99, 1.05, 0.97, 1.08, 1.01 };
    static const size_t with_empty[] = { 4, 0, 4 };
    double means[3];
    ck_assert_int_eq(sl_stats_anova_oneway(&a, means, y, with_empty, 3), SL_OK);
    ck_assert_uint_eq(a.n_groups, 2);
    ck_assert(isnan(means[1]));
    /* scipy.stats.f_oneway([1.02, 0.95, 1.10, 0.99], [1.05, 0.97, 1.08, 1.01]) */
    check_near("F", a.f, 0.09881422924901186, 1e-12);
    check_near("p", a.p, 0.7639006312463288, 1e-12);
}
END_TEST

/* The same test from each group's size, mean and variance, as running
 * accumulators give them: the groups of test_anova_three_splits and of
 * test_anova_group_of_one_and_empty_group, means and variances by GSL. */
START_TEST(test_anova_from_moments)
{
    static const double x[] = { -0.41, -0.35, -0.52, -0.38, -0.44, 0.12, 0.05, 0.21, 0.09,
                                -1.05, -0.98, -1.12, -0.91, -1.01, -1.08 };
    static const size_t sizes[] = { 5, 4, 6 };
    double mean[3], var[3];
    for (size_t k = 0, first = 0; k < 3; first += sizes[k], k++) {
        mean[k] = gsl_stats_mean(x + first, 1, sizes[k]);
        var[k] = gsl_stats_variance(x + first, 1, sizes[k]);
    }
    sl_stats_anova a;
    ck_assert_int_eq(sl_stats_anova_moments(&a, sizes, mean, var, 3), SL_OK);
    ck_assert_uint_eq(a.n_groups, 3);
    ck_assert_uint_eq(a.n_total, 15);
    check_near("F", a.f, 325.87022448115647, 1e-9);     /* scipy.stats.f_oneway(a, b, c).statistic */
    check_near("p", a.p / 3.492189222754767e-11, 1.0, 1e-8); /* scipy.stats.f_oneway(a, b, c).pvalue */

    /* a group of one (its variance is not used) and an empty group (nor its mean) */
    static const size_t with_one[] = { 5, 4, 1, 0 };
    double mean1[] = { mean[0], mean[1], -0.20, NAN }, var1[] = { var[0], var[1], NAN, NAN };
    ck_assert_int_eq(sl_stats_anova_moments(&a, with_one, mean1, var1, 4), SL_OK);
    ck_assert_uint_eq(a.n_groups, 3);
    check_near("F", a.f, 72.81530364372446, 1e-9); /* scipy.stats.f_oneway(a, b, [-0.20]).statistic */
    check_near("p", a.p, 2.065843544389173e-05, 1e-13); /* scipy.stats.f_oneway(a, b, [-0.20]).pvalue */

    var1[0] = -1.0;
    ck_assert_int_eq(sl_stats_anova_moments(&a, with_one, mean1, var1, 4), SL_EINPUT);
    mean1[1] = NAN;
    var1[0] = var[0];
    ck_assert_int_eq(sl_stats_anova_moments(&a, with_one, mean1, var1, 4), SL_EINPUT);
}
END_TEST

START_TEST(test_anova_degenerate)
{
    static const double x[] = { 0.4, 0.5, 0.6 };
    static const size_t one_group[] = { 3 };
    static const size_t singles[] = { 1, 1, 1 };
    static const double flat[] = { 0.4, 0.4, 0.6, 0.6 };
    static const size_t two_pairs[] = { 2, 2 };
    sl_stats_anova a;
    ck_assert_int_eq(sl_stats_anova_oneway(&a, NULL, x, one_group, 1), SL_OK);
    ck_assert(a.n_groups == 1 && isnan(a.f) && isnan(a.p) && isnan(a.ms_between));
    ck_assert_int_eq(sl_stats_anova_oneway(&a, NULL, x, singles, 3), SL_OK);
    ck_assert(a.df_within == 0.0 && isnan(a.f) && isnan(a.p) && isnan(a.ms_within));
    check_near("ms_between", a.ms_between, 0.01, 1e-15); /* (0.1^2 + 0 + 0.1^2) / 2, by hand */
    ck_assert_int_eq(sl_stats_anova_oneway(&a, NULL, x, NULL, 0), SL_OK);
    ck_assert(a.n_groups == 0 && isnan(a.f) && isnan(a.p));
    ck_assert_int_eq(sl_stats_anova_oneway(&a, NULL, flat, two_pairs, 2), SL_OK);
    ck_assert(isinf(a.f) && a.f > 0.0 && a.p == 0.0); /* no spread inside, means differ */
}
END_TEST

/* ---- Pooling --------------------------------------------------------------- */

/* With w = 1 / se**2: pooled = numpy.sum(w * e) / numpy.sum(w),
 * se = 1 / numpy.sqrt(numpy.sum(w)), Q = numpy.sum(w * (e - pooled)**2),
 * p = scipy.stats.chi2.sf(Q, k - 1). */
START_TEST(test_pool_against_numpy)
{
    static const struct {
        size_t k;
        double est[4], se[4];
        double value, value_se, q, p;
    } table[] = {
        /* anneal-350 effect in four lots, 1e12 cm^-2: consistent */
        { 4, { 1.15, 1.32, 1.05, 1.24 }, { 0.10, 0.15, 0.08, 0.12 },
          1.1450844277673544, 0.051977769818905194, 3.4005008338544913, 0.33389795077389484 },
        /* three lots that disagree */
        { 3, { 0.62, 1.48, 0.95 }, { 0.09, 0.11, 0.10 },
          0.9599996666777775, 0.05715672404564383, 36.62871237625412, 1.1121827833372903e-08 },
    };
    for (size_t i = 0; i < N_OF(table); i++) {
        sl_stats_pooled r;
        ck_assert_int_eq(sl_stats_pool_inverse_variance(&r, table[i].est, table[i].se, table[i].k),
                         SL_OK);
        check_near("pooled", r.value, table[i].value, 1e-13);
        check_near("pooled se", r.se, table[i].value_se, 1e-14);
        check_near("Q", r.q, table[i].q, 1e-11);
        check_near("df", r.df, (double)(table[i].k - 1), 0.0);
        check_near("p / expected", r.p / table[i].p, 1.0, 1e-9);
    }
}
END_TEST

START_TEST(test_pool_edges)
{
    const double est[] = { 1.2, 0.9 };
    const double se[] = { 0.1, 0.0 };
    sl_stats_pooled r;
    ck_assert_int_eq(sl_stats_pool_inverse_variance(&r, est, se, 1), SL_OK);
    ck_assert(r.value == 1.2 && r.q == 0.0 && r.df == 0.0 && isnan(r.p));
    check_near("se", r.se, 0.1, 1e-16);
    ck_assert_int_eq(sl_stats_pool_inverse_variance(&r, est, se, 2), SL_EINPUT);
    ck_assert_int_eq(sl_stats_pool_inverse_variance(&r, est, se, 0), SL_EINPUT);
}
END_TEST

/* ---- Individuals control chart -------------------------------------------- */

START_TEST(test_ichart_by_hand)
{
    static const struct {
        size_t n;
        double x[7];
        double center, mr_bar, lcl, ucl;
        int flags[7];
    } table[] = {
        /* mean 11.0 / 5 = 2.2; MR 0.4, 0.3, 0.2, 0.1 -> MR-bar 1.0 / 4 = 0.25;
         * limits 2.2 -/+ 3 * 0.25 / 1.128 = 2.2 -/+ 0.66489361702 */
        { 5, { 2.0, 2.4, 2.1, 2.3, 2.2 }, 2.2, 0.25, 1.5351063829787234, 2.8648936170212766,
          { 0 } },
        /* mean 15.3 / 7 = 2.185714285714; MR 5 x 0.1 and 0.9 -> MR-bar 1.4 / 6;
         * limits 2.1857142857 -/+ 3 * 0.2333333333 / 1.128 = -/+ 0.62056737589 */
        { 7, { 2.0, 2.1, 2.0, 2.1, 2.0, 2.1, 3.0 }, 2.1857142857142857, 1.4 / 6.0,
          1.5651469098277609, 2.806281661600811, { 0, 0, 0, 0, 0, 0, 1 } },
        /* mean 34.3 / 7 = 4.9; MR 5 x 0.1 and 1.1 -> MR-bar 1.6 / 6;
         * limits 4.9 -/+ 3 * 0.2666666667 / 1.128 = 4.9 -/+ 0.70921985816 */
        { 7, { 5.0, 5.1, 5.0, 5.1, 5.0, 5.1, 4.0 }, 4.9, 1.6 / 6.0, 4.190780141843972,
          5.609219858156029, { 0, 0, 0, 0, 0, 0, -1 } },
    };
    for (size_t i = 0; i < N_OF(table); i++) {
        sl_stats_ichart c;
        int flags[7];
        ck_assert_int_eq(sl_stats_individuals_chart(&c, flags, table[i].x, table[i].n), SL_OK);
        check_near("center", c.center, table[i].center, 1e-12);
        check_near("mr_bar", c.mr_bar, table[i].mr_bar, 1e-12);
        check_near("sigma", c.sigma, table[i].mr_bar / 1.128, 1e-12);
        check_near("lcl", c.lcl, table[i].lcl, 1e-9);
        check_near("ucl", c.ucl, table[i].ucl, 1e-9);
        size_t outside = 0;
        for (size_t j = 0; j < table[i].n; j++) {
            ck_assert_int_eq(flags[j], table[i].flags[j]);
            outside += flags[j] != 0;
        }
        ck_assert_uint_eq(c.n_outside, outside);
    }
}
END_TEST

START_TEST(test_ichart_short_series)
{
    const double x[] = { 1.3 };
    int flag = 5;
    sl_stats_ichart c;
    ck_assert_int_eq(sl_stats_individuals_chart(&c, &flag, x, 1), SL_OK);
    ck_assert(c.center == 1.3 && isnan(c.mr_bar) && isnan(c.sigma));
    ck_assert(isnan(c.lcl) && isnan(c.ucl) && flag == 0 && c.n_outside == 0);
    ck_assert_int_eq(sl_stats_individuals_chart(&c, NULL, x, 0), SL_EINPUT);
}
END_TEST

/* ---- Noncentral t, verdicts, power ------------------------------------------ */

typedef struct {
    double t, df, nc, sf;
} nct_case;

/* Each sf is scipy.stats.nct.sf(t, df, nc) in SciPy 1.10.1, e.g.
 * scipy.stats.nct.sf(2.0, 5, 1.0) = 0.221925337384 (the call on each row with
 * that row's three arguments). */
static const nct_case nct_cases[] = {
    { 2.0, 5, 1.0, 0.221925337384 },
    { 1.5, 1, 2.5, 0.835511570087 },
    { 0.5, 30, -1.0, 0.0677476396683 },
    { 2.1009, 18, 3.0, 0.809712027997 },
    { -1.0, 3, 0.5, 0.907878790186 },
    { 3.0, 2.5, 4.0, 0.790354992308 },
    { 2.0, 100, 2.0, 0.501985541213 },
    { 2.0, 800, 2.5, 0.691462769753 },
    { 0.0, 10, 0.0, 0.5 },
    { 5.0, 4, 8.0, 0.945201718526 },
    { -2.0, 7, -3.0, 0.171545757192 },
    { 2.2281, 10, 0.25, 0.0415728038905 },
    { 2.0, 12, 12.0, 1.0 },
};

START_TEST(test_nct_against_scipy)
{
    for (size_t i = 0; i < sizeof nct_cases / sizeof nct_cases[0]; i++) {
        const nct_case *c = &nct_cases[i];
        double sf = sl_stats_nct_sf(c->t, c->df, c->nc);
        ck_assert_msg(fabs(sf - c->sf) < 1e-6, "row %zu: %.10g vs %.10g", i, sf, c->sf);
        ck_assert_double_eq_tol(sl_stats_nct_cdf(c->t, c->df, c->nc), 1.0 - c->sf, 1e-6);
    }
    /* nc = 0 is Student t: gsl_cdf_tdist_Q(1.3, 6) */
    ck_assert_double_eq_tol(sl_stats_nct_sf(1.3, 6, 0.0), gsl_cdf_tdist_Q(1.3, 6), 1e-9);
    ck_assert(isnan(sl_stats_nct_sf(1.0, 0.0, 1.0)));
    ck_assert(isnan(sl_stats_nct_sf(NAN, 3.0, 1.0)));
}
END_TEST

START_TEST(test_verdicts)
{
    /* t_{0.975, 10} = 2.228139 (gsl_cdf_tdist_Pinv); T = 1 */
    double t = gsl_cdf_tdist_Pinv(0.975, 10);
    ck_assert_int_eq(sl_stats_verdict(0.1, 0.1, 10, 1.0, 0.05), SL_VERDICT_AS_PLANNED);
    ck_assert_int_eq(sl_stats_verdict(1.0 + t * 0.1 + 1e-6, 0.1, 10, 1.0, 0.05),
                     SL_VERDICT_OFF_PLAN);
    ck_assert_int_eq(sl_stats_verdict(-2.0, 0.1, 10, 1.0, 0.05), SL_VERDICT_OFF_PLAN);
    ck_assert_int_eq(sl_stats_verdict(1.0, 0.1, 10, 1.0, 0.05), SL_VERDICT_DIFFERS);
    ck_assert_int_eq(sl_stats_verdict(0.3, 0.5, 10, 1.0, 0.05), SL_VERDICT_INCONCLUSIVE);
    ck_assert_int_eq(sl_stats_verdict(5.0, 0.1, 0.0, 1.0, 0.05), SL_VERDICT_INCONCLUSIVE);
    ck_assert_int_eq(sl_stats_verdict(5.0, NAN, 4.0, 1.0, 0.05), SL_VERDICT_INCONCLUSIVE);
    ck_assert_str_eq(sl_stats_verdict_name(SL_VERDICT_OFF_PLAN), "off-plan");
}
END_TEST

/* Power = P[t'(df, shift/se) > t_{1-a/2,df}] + P[t'(df, (2T+shift)/se) < -t_{1-a/2,df}];
 * se 0.1, T 0.3, shift 0.25, df 12, alpha 0.05: t_{0.975,12} = 2.17881283
 * (scipy.stats.t.ppf(0.975, 12)); scipy.stats.nct.sf(2.1788128296634177, 12, 2.5)
 * = 0.6319957846836533 and scipy.stats.nct.cdf(-2.1788128296634177, 12, 8.5)
 * = 0.0 (below double precision there). */
START_TEST(test_offplan_power)
{
    double t = gsl_cdf_tdist_Pinv(0.975, 12);
    double power = sl_stats_offplan_power(0.1, 12, 0.3, 0.25, 0.05);
    ck_assert_double_eq_tol(power, sl_stats_nct_sf(t, 12, 2.5), 1e-12);
    ck_assert_double_eq_tol(power, 0.6319957846836533, 1e-6);
    /* at T = 0 the false rate is the two-sided alpha */
    ck_assert_double_eq_tol(sl_stats_offplan_false_rate(0.1, 12, 0.0, 0.05), 0.05, 1e-8);
    ck_assert(sl_stats_offplan_false_rate(0.1, 12, 0.3, 0.05) < 1e-3);
    ck_assert_double_eq(sl_stats_offplan_power(0.1, 0.0, 0.3, 0.25, 0.05), 0.0);
    ck_assert(isnan(sl_stats_offplan_power(0.0, 12, 0.3, 0.25, 0.05)));
}
END_TEST

/* ---- GLS covariance ------------------------------------------------------- */

/* 2 x 2 factorial, two wafers per cell, columns intercept, A, B (A slowest). */
static const double design_2x2[8 * 3] = {
    1, 0, 0, 1, 0, 0, 1, 0, 1, 1, 0, 1, 1, 1, 0, 1, 1, 0, 1, 1, 1, 1, 1, 1,
};

static void check_gls_se(const sl_stats_gls_model *m, const double *se, double cov01)
{
    double cov[9];
    ck_assert_int_eq(sl_stats_gls_cov(cov, m), SL_OK);
    for (size_t k = 0; k < 3; k++)
        ck_assert_double_eq_tol(sqrt(cov[k * 3 + k]), se[k], 1e-10 * se[k]);
    ck_assert_double_eq_tol(cov[1], cov01, 1e-10);
}

/* Reference: numpy, C = np.linalg.inv(X.T @ np.linalg.inv(V) @ X) with
 * V = np.diag(v) + load_var * Z @ Z.T; se = np.sqrt(np.diag(C)). */
START_TEST(test_gls_cov_against_numpy)
{
    double v8[8] = { 2, 2, 2, 2, 2, 2, 2, 2 };
    sl_stats_gls_model balanced = { 8, 3, 0, 0, design_2x2, v8, NULL, 0.0 };
    check_gls_se(&balanced, (const double[]){ 0.866025403784, 1.0, 1.0 }, -0.5);

    /* a spare wafer added to cell (1, 1); var = 1 + 0.5 / m, m usable devices
     * 30, 25, 30, 31, 20, 30, 28, 30, 15 */
    double x9[9 * 3];
    memcpy(x9, design_2x2, sizeof design_2x2);
    x9[24] = 1, x9[25] = 1, x9[26] = 1;
    const double m[9] = { 30, 25, 30, 31, 20, 30, 28, 30, 15 };
    double v9[9];
    for (size_t i = 0; i < 9; i++)
        v9[i] = 1.0 + 0.5 / m[i];
    sl_stats_gls_model unbalanced = { 9, 3, 0, 0, x9, v9, NULL, 0.0 };
    check_gls_se(&unbalanced, (const double[]){ 0.608627490399, 0.68063682899, 0.680782995347 },
                 -0.231350885464);

    /* the B = 1 wafers (rows 2, 3, 6, 7) in two loads balanced over A, load_var 0.7 */
    const long load[8] = { -1, -1, 0, 1, -1, -1, 0, 1 };
    sl_stats_gls_model batched = { 8, 3, 2, 1, design_2x2, v8, load, 0.7 };
    check_gls_se(&batched, (const double[]){ 0.866025403784, 1.0, 1.16189500386 }, -0.5);

    /* a load scatter 1e22 times the wafers': exact rational arithmetic
     * (python3 fractions.Fraction, Gauss-Jordan on the same X and V) gives
     * se 0.866025403784, 1 and 70710678118.7 */
    sl_stats_gls_model wide = { 8, 3, 2, 1, design_2x2, v8, load, 1e22 };
    check_gls_se(&wide, (const double[]){ 0.866025403784, 1.0, 70710678118.7 }, -0.5);

    /* two batched steps (the loads' block no longer diagonal): step 2 takes
     * rows 0, 1, 4, 5 in load 2 and rows 2, 3 in load 3 */
    const long load2[8 * 2] = { -1, 2, -1, 2, 0, 3, 1, 3, -1, 2, -1, 2, 0, -1, 1, -1 };
    sl_stats_gls_model two_steps = { 8, 3, 4, 2, design_2x2, v8, load2, 0.7 };
    check_gls_se(&two_steps, (const double[]){ 1.21952205497, 1.07188440152, 1.48288103711 },
                 -0.574468085106);

    /* B is carried by the loads: 2 loads + 4 wafers outside = 6 units - 3 */
    double df[3];
    sl_stats_coef_df(df, &batched);
    ck_assert_double_eq(df[1], 5.0);
    ck_assert_double_eq(df[2], 3.0);
    v8[0] = 0.0;
    ck_assert_int_eq(sl_stats_gls_cov(df, &balanced), SL_EINPUT);
}
END_TEST

/* Balanced wafers with equal devices: the wafer-level least squares is
 * ordinary least squares of the means, whatever the variance components, so
 * coef and se must equal sl_stats_linear_fit's, without loads (the moments
 * estimator) and with loads of one wafer each and no load scatter found. */
START_TEST(test_wafer_effects_balanced_is_ols)
{
    const double y[8] = { 1.0e12, 1.2e12, 2.1e12, 1.8e12, 0.4e12, 0.7e12, 1.6e12, 1.3e12 };
    double var[8];
    for (size_t i = 0; i < 8; i++)
        var[i] = 0.04 * 2.0e11 * 2.0e11 / 25; /* 0.2 V over 25 devices at 2e11 cm^-2/V */
    sl_stats_wafer_data in = { 8, 3, 0, 0, design_2x2, y, var, NULL };
    sl_stats_wafer_fit fit;
    ck_assert_int_eq(sl_stats_wafer_effects(&fit, &in), SL_OK);
    sl_stats_fit *ols = NULL;
    ck_assert_int_eq(sl_stats_linear_fit(&ols, design_2x2, y, NULL, 8, 3, NULL), SL_OK);
    for (size_t k = 0; k < 3; k++) {
        ck_assert_double_eq_tol(fit.coef[k], ols->coef[k], 1e-6 * 1e12);
        ck_assert_double_eq_tol(fit.se[k], ols->se[k], 1e-6 * ols->se[k]);
        ck_assert_double_eq(fit.df[k], 5.0);
    }
    /* moments: sigma_w^2 = RSS / (n - p) - v for equal v (balanced) */
    double expect = ols->resid_var - var[0];
    ck_assert_double_eq_tol(fit.wafer_sigma_per_cm2 * fit.wafer_sigma_per_cm2, expect,
                            1e-6 * expect);
    /* REML with every wafer its own load: the components share out the same
     * total, and the balanced fit is still ordinary least squares */
    const long own[8] = { 0, 1, 2, 3, 4, 5, 6, 7 };
    sl_stats_wafer_data loaded = { 8, 3, 8, 1, design_2x2, y, var, own };
    ck_assert_int_eq(sl_stats_wafer_effects(&fit, &loaded), SL_OK);
    for (size_t k = 0; k < 3; k++) {
        ck_assert_double_eq_tol(fit.coef[k], ols->coef[k], 1e-6 * 1e12);
        ck_assert_double_eq_tol(fit.se[k], ols->se[k], 1e-4 * ols->se[k]);
    }
    double total = fit.wafer_sigma_per_cm2 * fit.wafer_sigma_per_cm2 +
                   fit.load_sigma_per_cm2 * fit.load_sigma_per_cm2;
    ck_assert_double_eq_tol(total, expect, 1e-2 * expect);
    sl_stats_fit_free(ols);
    in.n_wafers = 3; /* not more wafers than coefficients */
    ck_assert_int_eq(sl_stats_wafer_effects(&fit, &in), SL_EINPUT);
}
END_TEST


/* ---- Wafer means: variance components, censoring, verdict, pooling -------- */

/* Seven wafer means (two factors, unbalanced) with their sampling variances;
 * the reference is NumPy 1.24.2 following the moments estimate of the header:
 *   X = [[1,0,0],[1,0,0],[1,0,1],[1,0,1],[1,1,0],[1,1,1],[1,1,1]]
 *   y = [1.0,1.3,2.1,2.6,1.9,3.4,2.9]; v = [.01,.04,.02,.01,.03,.02,.05]
 *   b, rss = numpy.linalg.lstsq(X, y)[:2]; h = diag(X inv(X'X) X')
 *   su2 = max(0, (rss - sum((1 - h) v)) / (n - p)); w = 1 / (su2 + v)
 *   cov0 = inv(X' W X); bw = cov0 X' W y; s2 = sum(w r^2) / (n - p)
 *   se = sqrt(diag(cov0) s2) */
START_TEST(test_components_fit_against_numpy)
{
    static const double x[] = { 1, 0, 0, 1, 0, 0, 1, 0, 1, 1, 0, 1, 1, 1, 0, 1, 1, 1, 1, 1, 1 };
    static const double y[] = { 1.0, 1.3, 2.1, 2.6, 1.9, 3.4, 2.9 };
    static const double v[] = { 0.01, 0.04, 0.02, 0.01, 0.03, 0.02, 0.05 };
    static const double b[] = { 1.1109254586270658, 0.8079360354427529, 1.2663409762103155 };
    static const double se[] = { 0.17079261023061204, 0.21223838722753532, 0.20905878992263527 };
    sl_stats_fit *fit = NULL;
    double su2 = 0.0;
    ck_assert_int_eq(sl_stats_fit_components(&fit, &su2, x, y, v, 7, 3, NULL), SL_OK);
    check_near("sigma_u^2", su2, 0.04849999999999986, 1e-12); /* numpy above */
    check_array_near("b", fit->coef, b, 3, 1e-12);
    check_array_near("se", fit->se, se, 3, 1e-12);
    ck_assert_uint_eq(fit->df_resid, 4);
    sl_stats_fit_free(fit);
    /* no sampling variance at all: the ordinary fit */
    ck_assert_int_eq(sl_stats_fit_components(&fit, &su2, x, y, NULL, 7, 3, NULL), SL_OK);
    check_near("sigma_u^2 = s^2", su2, fit->resid_var, 0.0);
    sl_stats_fit_free(fit);
    double bad[7] = { 0.01, -0.01, 0.01, 0.01, 0.01, 0.01, 0.01 };
    ck_assert_int_eq(sl_stats_fit_components(&fit, &su2, x, y, bad, 7, 3, NULL), SL_EINPUT);
    ck_assert_ptr_null(fit);
}
END_TEST

/* Censored-normal ML mean against scipy.optimize.minimize_scalar of
 *   n (xbar - mu)^2 / (2 s^2) - na scipy.stats.norm.logsf((a - mu) / s)
 *     - nb scipy.stats.norm.logcdf((b - mu) / s)      (tol=1e-12) */
START_TEST(test_censored_mean_against_scipy)
{
    double mean = 0.0, se = 0.0;
    ck_assert_int_eq(sl_stats_censored_mean(&mean, &se, 5, 1.0, 0.5, 2, 1.4, 1, 0.3), SL_OK);
    check_near("both sides", mean, 1.0596521106484544, 1e-6);
    /* 1 / sqrt of the central second difference of the same function, h = 1e-4 */
    check_near("se", se, 0.18417019464128115, 1e-5);
    ck_assert_int_eq(sl_stats_censored_mean(&mean, NULL, 8, 7.2, 0.6, 3, 7.5, 0, 0.0), SL_OK);
    check_near("above only", mean, 7.403242865143219, 1e-6);
    /* nothing censored: the sample mean, sigma / sqrt(n) */
    ck_assert_int_eq(sl_stats_censored_mean(&mean, &se, 4, 2.5, 0.4, 0, 0.0, 0, 0.0), SL_OK);
    check_near("plain mean", mean, 2.5, 0.0);
    check_near("plain se", se, 0.2, 1e-15);
    ck_assert_int_eq(sl_stats_censored_mean(&mean, &se, 0, 0.0, 0.4, 3, 1.0, 0, 0.0), SL_EINPUT);
    ck_assert_int_eq(sl_stats_censored_mean(&mean, &se, 3, 1.0, 0.0, 1, 1.0, 0, 0.0), SL_EINPUT);
}
END_TEST

/* The four verdicts at df = 8, se = 0.1, T = 0.5: t = 2.3060041350333704
 * (scipy.stats.t.ppf(0.975, 8)), so the interval is d -/+ 0.2306; the
 * rule of include/splitlot/stats.h (equivalence logic as in Schuirmann,
 * J. Pharmacokinet. Biopharm. 15, 657 (1987)). */
START_TEST(test_verdict_table)
{
    static const struct {
        double d, se, df, tol;
        sl_stats_verdict_kind want;
    } table[] = {
        { 0.0, 0.1, 8, 0.5, SL_VERDICT_AS_PLANNED },     /* [-0.23, 0.23] inside */
        { 0.26, 0.1, 8, 0.5, SL_VERDICT_AS_PLANNED },    /* [0.03, 0.49]: inside, not 0 */
        { 0.4, 0.1, 8, 0.5, SL_VERDICT_DIFFERS },        /* [0.17, 0.63] */
        { -0.4, 0.1, 8, 0.5, SL_VERDICT_DIFFERS },       /* [-0.63, -0.17] */
        { 0.8, 0.1, 8, 0.5, SL_VERDICT_OFF_PLAN },       /* [0.57, 1.03] */
        { -0.8, 0.1, 8, 0.5, SL_VERDICT_OFF_PLAN },      /* [-1.03, -0.57] */
        { 0.1, 0.3, 8, 0.5, SL_VERDICT_INCONCLUSIVE },   /* [-0.59, 0.79] */
        { 0.0, 0.1, 0, 0.5, SL_VERDICT_INCONCLUSIVE },   /* no df */
        { 0.0, NAN, 8, 0.5, SL_VERDICT_INCONCLUSIVE },   /* no SE */
        { 0.3, 0.1, 8, 0.0, SL_VERDICT_OFF_PLAN },       /* T = 0: excludes 0 */
        /* t at 4 df, 2.7764451051977987 (scipy.stats.t.ppf(0.975, 4)): [0.02, 0.58] */
        { 0.3, 0.1, 4, 0.5, SL_VERDICT_DIFFERS },
    };
    for (size_t i = 0; i < N_OF(table); i++) {
        sl_stats_verdict_kind v = sl_stats_verdict(table[i].d, table[i].se, table[i].df,
                                                   table[i].tol, 0.05);
        ck_assert_msg(v == table[i].want, "row %zu: %s", i, sl_stats_verdict_name(v));
    }
    ck_assert_str_eq(sl_stats_verdict_name(SL_VERDICT_OFF_PLAN), "off-plan");
    ck_assert_str_eq(sl_stats_verdict_name(SL_VERDICT_AS_PLANNED), "as-planned");
    ck_assert_str_eq(sl_stats_verdict_name(SL_VERDICT_DIFFERS), "differs");
    ck_assert_str_eq(sl_stats_verdict_name(SL_VERDICT_INCONCLUSIVE), "inconclusive");
}
END_TEST

/* DerSimonian and Laird (1986), their formulas by hand (Python, no library):
 *   w = 1/se^2; fe = sum(w y)/sum(w); Q = sum(w (y - fe)^2)
 *   tau2 = max(0, (Q - (k-1)) / (sum(w) - sum(w^2)/sum(w)))
 *   w* = 1/(se^2 + tau2); value = sum(w* y)/sum(w*); se = 1/sqrt(sum(w*)) */
START_TEST(test_random_effects_pool_by_hand)
{
    static const double est[] = { 1.0, 1.8, 0.6, 1.3 }, se[] = { 0.2, 0.3, 0.25, 0.15 };
    sl_stats_pooled r;
    ck_assert_int_eq(sl_stats_pool_random_effects(&r, est, se, 4), SL_OK);
    check_near("Q", r.q, 11.078378723948346, 1e-12);
    check_near("tau", r.tau, 0.3506680495359625, 1e-12);
    check_near("value", r.value, 1.1585444865747836, 1e-12);
    check_near("se", r.se, 0.2080723504481151, 1e-12);
    /* estimates that agree within their errors: tau = 0, the fixed pool */
    static const double close[] = { 1.0, 1.05, 0.98 }, close_se[] = { 0.2, 0.2, 0.2 };
    ck_assert_int_eq(sl_stats_pool_random_effects(&r, close, close_se, 3), SL_OK);
    check_near("tau 0", r.tau, 0.0, 0.0);
    check_near("fixed se", r.se, 0.2 / sqrt(3.0), 1e-15);
    ck_assert_int_eq(sl_stats_pool_random_effects(&r, est, se, 1), SL_OK);
    ck_assert(isnan(r.tau));
    check_near("one", r.value, 1.0, 0.0);
}
END_TEST

static Suite *stats_suite(void)
{
    Suite *s = suite_create("stats");
    TCase *tc = tcase_create("core");
    tcase_add_test(tc, test_median_mad_odd);
    tcase_add_test(tc, test_median_even_count);
    tcase_add_test(tc, test_mad_zero_falls_back_to_mean_ad);
    tcase_add_test(tc, test_all_equal_gives_zero_scores);
    tcase_add_test(tc, test_robust_bad_input);
    tcase_add_test(tc, test_robust_from_parts);
    tcase_add_test(tc, test_median_search_matches_sorting);
    tcase_add_test(tc, test_median_search_bad_input);
    tcase_add_test(tc, test_summary_against_scipy);
    tcase_add_test(tc, test_summary_from_moments);
    tcase_add_test(tc, test_summary_one_value);
    tcase_add_test(tc, test_summary_bad_input);
    tcase_add_test(tc, test_quantiles_and_p_values);
    tcase_add_test(tc, test_distribution_domain);
    tcase_add_test(tc, test_design_treatment_coding);
    tcase_add_test(tc, test_design_bad_levels);
    tcase_add_test(tc, test_ols_against_numpy);
    tcase_add_test(tc, test_wls_against_numpy);
    tcase_add_test(tc, test_fit_exact_has_no_errors);
    tcase_add_test(tc, test_fit_rank_deficient);
    tcase_add_test(tc, test_fit_bad_input);
    tcase_add_test(tc, test_anova_three_splits);
    tcase_add_test(tc, test_anova_group_of_one_and_empty_group);
    tcase_add_test(tc, test_anova_from_moments);
    tcase_add_test(tc, test_anova_degenerate);
    tcase_add_test(tc, test_pool_against_numpy);
    tcase_add_test(tc, test_pool_edges);
    tcase_add_test(tc, test_ichart_by_hand);
    tcase_add_test(tc, test_ichart_short_series);
    tcase_add_test(tc, test_nct_against_scipy);
    tcase_add_test(tc, test_verdicts);
    tcase_add_test(tc, test_offplan_power);
    tcase_add_test(tc, test_gls_cov_against_numpy);
    tcase_add_test(tc, test_wafer_effects_balanced_is_ols);
    tcase_add_test(tc, test_components_fit_against_numpy);
    tcase_add_test(tc, test_censored_mean_against_scipy);
    tcase_add_test(tc, test_verdict_table);
    tcase_add_test(tc, test_random_effects_pool_by_hand);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(stats_suite()); }
