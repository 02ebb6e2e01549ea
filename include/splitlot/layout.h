/* SPDX-License-Identifier: MIT
 * The lot layout: which wafer goes to which split and in which order the
 * wafers are processed, randomised reproducibly from the plan's seed, and per
 * split the devices needed to resolve the plan's shift against those available.
 * Not for: physics predictions (predict.h) or storage (store.h).
 */
#ifndef SPLITLOT_LAYOUT_H
#define SPLITLOT_LAYOUT_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/plan.h"

/* One wafer of the plan, in the order of plan->wafers. */
typedef struct {
    char *wafer;             /* wafer id, as in plan->wafers */
    long split;              /* index into plan->splits, -1 for a spare */
    size_t process_order;    /* 1-based position in processing, 0 for a spare */
} sl_layout_wafer;

typedef enum {
    SL_LAYOUT_NOT_ASKED = 0, /* the plan has no resolve block */
    SL_LAYOUT_ENOUGH,        /* devices_available >= devices_needed */
    SL_LAYOUT_TOO_FEW
} sl_layout_verdict;

/* One split of the plan, in the order of plan->splits. */
typedef struct {
    size_t *wafers;          /* indices into layout->wafers (and plan->wafers) */
    size_t n_wafers;
    size_t devices_needed;   /* per split, from sl_layout_sample_size; 0 when not asked */
    double devices_available;/* wafers x devices_per_wafer x expected_yield */
    sl_layout_verdict verdict;
} sl_layout_split;

typedef struct sl_layout {
    sl_layout_wafer *wafers;
    size_t n_wafers;
    sl_layout_split *splits;
    size_t n_splits;
} sl_layout;

/* Build the layout of a validated plan. Full-factorial: the wafer ids are
 * shuffled (GSL gsl_rng_mt19937 seeded with plan->seed, which the plan
 * limits to 32 bits; gsl_ran_shuffle) and dealt wafers_per_split at a time to splits 0, 1, ...;
 * the rest are spares. Explicit: the wafers as the plan gives them. Processing
 * order: a second shuffle over all assigned wafers. The same seed gives the
 * same layout on any machine. Returns SL_OK, SL_EINPUT (plan inconsistent,
 * message in diag), SL_ENUM (sample size failed), SL_ENOMEM. */
sl_status sl_layout_build(sl_layout **out, const sl_plan *plan, sl_diag *diag);

void sl_layout_free(sl_layout *layout);

/* Split index of a wafer id, -1 if it is a spare or unknown. */
long sl_layout_split_of_wafer(const sl_layout *layout, const char *wafer);

/* Devices per group for a two-sided two-sample comparison of means that
 * detects a shift of shift_V with probability power at level alpha, when
 * devices scatter with sigma_V (docs/statistics.md):
 *   n = 2 sigma^2 (z_{1-alpha/2} + z_{1-power})^2 / shift^2,
 * then refined with Student t quantiles at df = 2 (n - 1) until n (rounded up)
 * is stable (if rounding makes it alternate between two values, the larger);
 * at least 2. Domain: shift_V > 0, sigma_V > 0, 0 < alpha < 1,
 * 0 < power < 1. Returns SL_OK, SL_EINPUT outside the domain, SL_ENUM if the
 * iteration does not settle or n exceeds 1e9. */
sl_status sl_layout_sample_size(size_t *n_out, double shift_V, double sigma_V, double alpha,
                                double power);

#endif
