/* SPDX-License-Identifier: MIT
 * Private to the analysis: the main-effects estimate shared by one lot's
 * analysis (analyze_stream.c) and the history across lots
 * (analyze_history.c), and what the in-memory analysis (analyze.c) needs of
 * the stream it is built on.
 */
#ifndef SL_ANALYZE_INTERNAL_H
#define SL_ANALYZE_INTERNAL_H

#include "splitlot/analyze.h"
#include "splitlot/layout.h"

/* An analysis with the device rows its devices point into (NULL when it has
 * no devices): what sl_analysis_free frees. */
typedef struct {
    sl_analysis pub;
    sl_store_device_row *rows;
} sl_analysis_owner;

/* What the analysis keeps of one wafer (plan wafer index), volts. */
typedef struct {
    long split;              /* -1: the wafer is not in the design */
    size_t n_usable;         /* usable devices */
    double min_V, max_V;     /* of their V_cnp */
    double median_V;         /* of their V_cnp */
    size_t n;                /* usable, not outliers: the wafer mean's devices */
    double mean_V, m2_V2;    /* their mean and sum of squared deviations */
    size_t n_above, n_below; /* censored: V_cnp above / below the sweep */
    double above_V, below_V; /* the least extreme bound of each side */
    size_t n_censored_outliers; /* censored beyond the outlier limit: not in the mean */
} sl_analyze_wafer;

/* Add a usable, non-outlier V_cnp to a wafer (Welford's running moments). */
void sl__analyze_wafer_add(sl_analyze_wafer *w, double cnp_V);

/* Add a censored device whose V_cnp lies above (above = 1) or below bound_V. */
void sl__analyze_wafer_censor(sl_analyze_wafer *w, int above, double bound_V);

/* A censored device scored as a measured one would be: when its bound
 * already lies beyond the outlier limit (|modified z| of bound - wafer
 * median above SL_STATS_MODIFIED_Z_THRESHOLD, robust the dielectric's
 * pooled residual scale) the device is a known outlier, counted but kept
 * out of the wafer mean (returns 1); otherwise, or without a robust scale
 * (robust NULL: too few devices to score), it enters the censored
 * likelihood through sl__analyze_wafer_censor (returns 0). */
int sl__analyze_wafer_censor_scored(sl_analyze_wafer *w, const sl_stats_robust *robust, int above,
                                   double bound_V);

/* Everything that speaks for a split or a level, from the wafers (layout
 * order, layout->n_wafers entries) with the wafer as the unit: the pooled
 * device SD per dielectric, each wafer's mean (censored-normal ML where it
 * has censored devices), split summaries, the ANOVA of wafer-mean doping,
 * the effects and their verdicts. Needs a->plan, a->splits (predictions,
 * device counts) and a->split_capacitance_F_per_m2. */
sl_status sl__analyze_wafer_statistics(sl_analysis *a, const sl_layout *layout,
                                      const sl_analyze_wafer *wafers);

/* Estimate every level's effect from wafer means of measured doping
 * (cm^-2, NaN for a wafer without a mean) and the sampling variance of
 * each (cm^-4); fills a->effects, the verdict counts, a->wafer_sigma_per_cm2
 * and a->effects_status / effects_note. */
sl_status sl__analyze_effects(sl_analysis *a, const sl_layout *layout,
                             const double *wafer_mean_per_cm2, const double *wafer_var_per_cm4);

/* A level's lots judged in order (drift from the second lot on, against the
 * random-effects pool of the lots before it that did not drift), its pool
 * and its chart: points[] (estimates and SEs) in, everything else out. */
sl_status sl__analyze_history_level(sl_history_level *l);

/* "baseline + ox90" (+ each other factor's reference level but 'none'):
 * the name of the intercept; factor f's reference level is
 * reference_levels[f * stride], or level 0 of every factor when
 * reference_levels is NULL. */
void sl__analyze_intercept_name(char *buf, size_t size, const sl_plan *plan,
                               const size_t *reference_levels, size_t stride);

/* Planned doping of a factor's level (cm^-2) and its own sigma. */
sl_est sl__analyze_planned_level(const sl_plan *plan, size_t factor, size_t level);

/* "lot 'X': its devices changed during the analysis" into diag; SL_EINPUT. */
sl_status sl__analyze_lot_changed(const sl_analysis *a, sl_diag *diag);

/* The stored row behind the device last given by the stream. */
const sl_store_device_row *sl__analysis_stream_row(const sl_analysis_stream *stream);

/* The stream's summary, which the caller now owns (free with
 * sl_analysis_free); the stream is freed. */
sl_analysis_owner *sl__analysis_stream_release(sl_analysis_stream *stream);

/* ---- per split: mobility, n0 and hysteresis (analyze_params.c) ---- */

/* Fewest usable devices for modified z-scores to mean anything (common
 * practice: a median and MAD of fewer points are too unstable). */
#define SL_ANALYZE_MIN_FOR_OUTLIERS 5

enum { SL_ANALYZE_PARAM_MOBILITY, SL_ANALYZE_PARAM_N0, SL_ANALYZE_PARAM_HYSTERESIS,
       SL_ANALYZE_N_PARAMS };

/* One parameter of one split over its usable devices with the value. */
typedef struct {
    size_t n;
    double min, max, median, mad, sum_abs;
    int first_mad_pass;
    sl_stats_median_search *search;
    sl_stats_robust robust;  /* median, MAD and scale of its modified z */
} analyze_param_state;

/* The phases of the analysis' passes over the kept values: ranges, then
 * medians, then MADs (each search phase as many passes as its slowest
 * search needs). */
typedef enum { SL__ANALYZE_PASS_RANGE, SL__ANALYZE_PASS_MEDIAN, SL__ANALYZE_PASS_MAD } analyze_pass;

/* state[split * SL_ANALYZE_N_PARAMS + param] (zeroed by the caller) over
 * the passes: a device's parameters visited in each pass of a phase; the
 * searches of a median or MAD phase started before its first pass, ended
 * after each (*open |= a search not done yet; SL_EINPUT when the devices
 * changed between passes) and stopped (freed) after its last; then each
 * split's medians, spreads (1.4826 MAD) and mobility against the plan
 * published into a->splits. */
void sl__analyze_params_visit(analyze_param_state *state, size_t n_splits, analyze_pass pass,
                              const sl_store_scratch_value *value);
sl_status sl__analyze_params_start(analyze_param_state *state, size_t n_splits, analyze_pass pass);
sl_status sl__analyze_params_end_pass(analyze_param_state *state, size_t n_splits,
                                      analyze_pass pass, int *open);
void sl__analyze_params_stop(analyze_param_state *state, size_t n_splits);
void sl__analyze_params_publish(analyze_param_state *state, sl_analysis *a);

/* Modified z of a mobility within its split; NaN with fewer than
 * SL_ANALYZE_MIN_FOR_OUTLIERS devices or no mobility. */
double sl__analyze_mobility_modified_z(const analyze_param_state *state, long split,
                                       double mobility);

#endif
