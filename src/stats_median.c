/* SPDX-License-Identifier: MIT
 * The exact median of a sample that is read in passes instead of held (see
 * sl_stats_median_search in include/splitlot/stats.h): a histogram narrows the
 * range of the middle rank(s) pass by pass until few enough values are left
 * to keep and sort. Fixed memory whatever the sample size; no I/O.
 */
#include "splitlot/stats.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

#define BINS SL_STATS_MEDIAN_BINS

typedef enum { SEARCH_COUNT, SEARCH_HOLD, SEARCH_DONE } search_mode;

struct sl_stats_median_search {
    search_mode mode;
    double lo, hi;         /* the values in question lie in [lo, hi] */
    size_t n_in_range;     /* and are this many */
    size_t rank[2];        /* the middle one(s) among them, 0-based */
    size_t seen;           /* values in [lo, hi] met in this pass */
    int by_order_key;      /* bins over order keys, not values (see narrow) */
    size_t count[BINS];
    double bin_min[BINS], bin_max[BINS];
    double *held;          /* SEARCH_HOLD: the values themselves */
    double middle[2];      /* the values at rank[0] and rank[1] */
    double median;
};

/* An integer in the order of the doubles (both zeros the same): binning these
 * keys splits any range in at most 64 / log2(BINS) passes, whatever the
 * spacing of the values, where binning the values themselves is faster for
 * ordinary samples but slow for values spread like 1, 1e-3, 1e-6, ... */
static uint64_t order_key(double x)
{
    uint64_t bits;
    if (x == 0.0)
        x = 0.0;
    memcpy(&bits, &x, sizeof bits);
    return (bits >> 63) ? ~bits : bits | (UINT64_C(1) << 63);
}

static size_t key_bin(const sl_stats_median_search *s, double x)
{
    uint64_t lo = order_key(s->lo), width = (order_key(s->hi) - lo) / BINS + 1;
    return (size_t)((order_key(x) - lo) / width);
}

/* Bin of x in [lo, hi] (lo < hi): monotone in x, lo in the first bin, hi in
 * the last, so a range never stays the same once its ends are values of the
 * sample. */
static size_t value_bin(const sl_stats_median_search *s, double x)
{
    double span = s->hi - s->lo, t;
    if (isfinite(span))
        t = (x - s->lo) / span;
    else /* wider than the largest double: halving keeps the order */
        t = (x / 2 - s->lo / 2) / (s->hi / 2 - s->lo / 2);
    size_t j = (size_t)(t * BINS);
    return j < BINS ? j : BINS - 1;
}

static void finish(sl_stats_median_search *s)
{
    s->median = gsl_stats_median_from_sorted_data(s->middle, 1, s->rank[0] == s->rank[1] ? 1 : 2);
    s->mode = SEARCH_DONE;
    free(s->held);
    s->held = NULL;
}

/* Set up the next pass over the values in [lo, hi]. */
static sl_status start_pass(sl_stats_median_search *s)
{
    s->seen = 0;
    if (s->lo == s->hi) { /* all equal */
        s->middle[0] = s->middle[1] = s->lo;
        finish(s);
    } else if (s->n_in_range <= SL_STATS_MEDIAN_HELD) {
        s->mode = SEARCH_HOLD;
        s->held = malloc(s->n_in_range * sizeof *s->held);
        if (!s->held)
            return SL_ENOMEM;
    } else {
        s->mode = SEARCH_COUNT;
        memset(s->count, 0, sizeof s->count);
        for (size_t j = 0; j < BINS; j++) {
            s->bin_min[j] = INFINITY;
            s->bin_max[j] = -INFINITY;
        }
    }
    return SL_OK;
}

sl_status sl_stats_median_search_new(sl_stats_median_search **out, size_t n, double lo, double hi)
{
    *out = NULL;
    if (n == 0 || !isfinite(lo) || !isfinite(hi) || lo > hi)
        return SL_EINPUT;
    sl_stats_median_search *s = calloc(1, sizeof *s);
    if (!s)
        return SL_ENOMEM;
    s->lo = lo;
    s->hi = hi;
    s->n_in_range = n;
    s->rank[0] = (n - 1) / 2;
    s->rank[1] = n / 2;
    sl_status st = start_pass(s);
    if (st != SL_OK) {
        sl_stats_median_search_free(s);
        return st;
    }
    *out = s;
    return SL_OK;
}

void sl_stats_median_search_add(sl_stats_median_search *s, double x)
{
    if (s->mode == SEARCH_DONE || !(x >= s->lo && x <= s->hi))
        return;
    if (s->mode == SEARCH_HOLD) {
        if (s->seen < s->n_in_range)
            s->held[s->seen] = x;
    } else {
        size_t j = s->by_order_key ? key_bin(s, x) : value_bin(s, x);
        s->count[j]++;
        s->bin_min[j] = fmin(s->bin_min[j], x);
        s->bin_max[j] = fmax(s->bin_max[j], x);
    }
    s->seen++;
}

/* After a counting pass: keep the bin of the middle rank(s), or read both
 * middle values off the bins when they fall in two. */
static sl_status narrow(sl_stats_median_search *s)
{
    size_t below = 0, j = 0;
    while (below + s->count[j] <= s->rank[0])
        below += s->count[j++];
    if (s->rank[1] >= below + s->count[j]) { /* rank[0] ends bin j */
        size_t k = j + 1;
        while (s->count[k] == 0)
            k++;
        s->middle[0] = s->bin_max[j];
        s->middle[1] = s->bin_min[k];
        finish(s);
        return SL_OK;
    }
    /* a bin that kept most of the values says they are spread unevenly:
     * split the next range by order keys, which always shrinks it */
    s->by_order_key = 2 * s->count[j] > s->n_in_range;
    s->lo = s->bin_min[j];
    s->hi = s->bin_max[j];
    s->n_in_range = s->count[j];
    s->rank[0] -= below;
    s->rank[1] -= below;
    return start_pass(s);
}

sl_status sl_stats_median_search_end_pass(sl_stats_median_search *s, int *done, double *median)
{
    sl_status st = SL_OK;
    if (s->mode != SEARCH_DONE && s->seen != s->n_in_range) {
        st = SL_EINPUT;
    } else if (s->mode == SEARCH_HOLD) {
        gsl_sort(s->held, 1, s->n_in_range);
        s->middle[0] = s->held[s->rank[0]];
        s->middle[1] = s->held[s->rank[1]];
        finish(s);
    } else if (s->mode == SEARCH_COUNT) {
        st = narrow(s);
    }
    *done = s->mode == SEARCH_DONE;
    if (*done)
        *median = s->median;
    return st;
}

int sl_stats_median_search_done(const sl_stats_median_search *s)
{
    return s->mode == SEARCH_DONE;
}

void sl_stats_median_search_free(sl_stats_median_search *s)
{
    if (!s)
        return;
    free(s->held);
    free(s);
}
