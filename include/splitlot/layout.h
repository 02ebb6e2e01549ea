/* SPDX-License-Identifier: MIT
 * The lot layout: which wafer goes to which split, which wafers share a load
 * of a batched step, and in which order wafers and loads are processed, all
 * randomised reproducibly from the plan's seed; and per level of every factor
 * the power of the analysis to find it off its plan, from the design matrix
 * of that assignment and the plan's variation block (wafer as the unit, the
 * load for a batched step), with a Monte-Carlo check of that power.
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
    size_t *load;            /* per plan batch: the 1-based load number of the
                                wafer in that step, 0 when it skips the step;
                                NULL without batches */
} sl_layout_wafer;

/* One split of the plan, in the order of plan->splits. */
typedef struct {
    size_t *wafers;          /* indices into layout->wafers (and plan->wafers) */
    size_t n_wafers;
    double devices_available;/* wafers x devices_per_wafer x expected_yield */
} sl_layout_split;

/* One load of a batched step, in processing order within its step. */
typedef struct {
    size_t batch;            /* index into plan->batches */
    size_t number;           /* 1-based, the order in which the step runs them */
    size_t *wafers;          /* indices into layout->wafers */
    size_t n_wafers;
} sl_layout_load;

typedef enum {
    SL_LAYOUT_UNKNOWN = 0,   /* no variation or resolve block: cannot say */
    SL_LAYOUT_ENOUGH,        /* power >= the plan's */
    SL_LAYOUT_TOO_FEW
} sl_layout_verdict;

/* The planning answer for one level (a non-reference level of a factor: its
 * difference from the factor's reference level is what the analysis
 * estimates). Numbers are NaN when unknown. */
typedef struct {
    size_t factor, level;            /* indices into plan->factors and its levels */
    size_t wafers;                   /* assigned wafers at this level */
    size_t loads;                    /* loads that carry it, 0 when not batched */
    double effect_se_per_cm2;        /* sqrt of its diagonal of (X^T V^-1 X)^-1 */
    double df;                       /* wafers (or units with loads) - coefficients */
    double tolerance_per_cm2;        /* the level's tolerance T
                                        (sl_plan_level_tolerance_per_cm2) */
    double shift_per_cm2;            /* the miss beyond T to be found */
    double power;                    /* P[off-plan | true miss T + shift] */
    double false_rate;               /* P[off-plan | level exactly as planned] */
    long wafers_per_split_needed;    /* smallest giving the plan's power; -1 if
                                        beyond the search's limits (below),
                                        0 when unknown */
    long devices_per_wafer_enough;   /* at wafers_per_split_needed, the fewest
                                        devices per wafer that still give the
                                        power (<= the plan's); 0 when unknown */
    int devices_cannot_help;         /* unlimited devices at today's wafers
                                        stay below the plan's power */
    sl_layout_verdict verdict;
} sl_layout_level;

/* The search for wafers_per_split_needed stops at 200 wafers per split, and
 * at 9999 wafers in all (as many as a plan may list). */
#define SL_LAYOUT_MAX_WAFERS_PER_SPLIT 200
#define SL_LAYOUT_MAX_WAFERS 9999

typedef struct sl_layout {
    sl_layout_wafer *wafers;
    size_t n_wafers;
    sl_layout_split *splits;
    size_t n_splits;
    sl_layout_load *loads;   /* every batched step's loads, step by step */
    size_t n_loads;
    sl_layout_level *levels; /* factor by factor, levels in plan order */
    size_t n_levels;
} sl_layout;

/* Build the layout of a validated plan. Full-factorial and fractional: the
 * wafer ids are shuffled (GSL gsl_rng_mt19937 seeded with plan->seed, which
 * the plan limits to 32 bits; gsl_ran_shuffle) and dealt wafers_per_split at
 * a time to splits 0, 1, ...; the rest are spares. Explicit: the wafers as
 * the plan gives them. Processing order: a second shuffle over all assigned
 * wafers. Batched steps: the wafers that get the step, grouped by split in a
 * shuffled order, are dealt round-robin to ceil(n / capacity) loads, so each
 * load holds at most capacity wafers and the other factors spread evenly
 * over the loads; loads are numbered in a shuffled processing order. Then the
 * power of every level (sl_layout_power). The same seed gives the same
 * layout on any machine. Returns SL_OK, SL_EINPUT (plan inconsistent,
 * message in diag), SL_ENUM (the design cannot estimate a level), SL_ENOMEM. */
sl_status sl_layout_build(sl_layout **out, const sl_plan *plan, sl_diag *diag);

void sl_layout_free(sl_layout *layout);

/* Split index of a wafer id, -1 if it is a spare or unknown. */
long sl_layout_split_of_wafer(const sl_layout *layout, const char *wafer);

/* The model a layout's power rests on, wafer by wafer (assigned wafers only,
 * in layout order): treatment-coded main-effects design X (intercept first,
 * then each factor's non-reference levels), the variance of each wafer mean
 * sigma_w^2 + (sigma_d,V C_g / e)^2 / m with m = devices_per_wafer x
 * expected_yield, C_g / e per wafer (cm^-2 per V), and the loads (Z). Free
 * with sl_layout_model_free. Returns SL_OK, SL_EINPUT (no variation block,
 * too many coefficients), SL_ENOMEM. */
typedef struct {
    size_t n_obs, n_coef, n_loads, n_steps;
    double *x, *var, *per_cm2_per_V;
    long *load;              /* n_obs x n_steps (plan batches): load index or -1 */
    size_t *wafer;           /* index into layout->wafers of each row */
    size_t *coef_factor, *coef_level;  /* what each column estimates */
    double load_var, wafer_var, device_var_V2, devices;
} sl_layout_model;

sl_status sl_layout_model_build(sl_layout_model *out, const sl_plan *plan, const sl_layout *layout,
                                double devices_per_wafer);
void sl_layout_model_free(sl_layout_model *model);

/* Fill layout->levels from the plan's variation and resolve blocks (levels
 * keep NaN numbers and SL_LAYOUT_UNKNOWN without them), including
 * wafers_per_split_needed from balanced layouts of 1, 2, ... wafers per split.
 * Returns SL_OK, SL_ENUM, SL_ENOMEM. */
sl_status sl_layout_power(sl_layout *layout, const sl_plan *plan);

/* Observed rates of N simulated lots for each level of layout->levels. */
typedef struct {
    size_t lots;             /* lots simulated and analysed */
    double *detected;        /* per level: off-plan verdicts with a true miss T + shift */
    double *false_verdict;   /* per level: off-plan verdicts with the level as planned */
    size_t n_levels;
} sl_layout_mc;

/* Simulate n_lots lots of the layout in memory (no files, no database) from
 * the plan's variation: per load an offset (batch sigma), per wafer an offset
 * (wafer sigma), per wafer m ~ Binomial(devices_per_wafer, expected_yield)
 * usable devices with their mean and within-wafer sum of squares drawn from
 * the device sigma (normal and chi-square, GSL); analyse each as compare does
 * (each wafer mean's variance from the device scatter pooled per dielectric,
 * then sl_stats_wafer_effects) and judge each level with sl_stats_verdict at the
 * plan's alpha, once as planned and once missed by T + shift (the estimator
 * is shift-equivariant, so one fit serves both). threads >= 1 workers with
 * their own generators seeded from seed. Free with sl_layout_mc_free.
 * Returns SL_OK, SL_EINPUT (no variation or resolve block, n_lots = 0),
 * SL_ENOMEM, SL_EIO (a thread could not start). */
sl_status sl_layout_simulate_power(sl_layout_mc *out, const sl_plan *plan, const sl_layout *layout,
                                   size_t n_lots, unsigned long seed, int threads);

void sl_layout_mc_free(sl_layout_mc *mc);

#endif
