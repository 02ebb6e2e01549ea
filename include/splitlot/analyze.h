/* SPDX-License-Identifier: MIT
 * Analysis of a measured lot against its plan: every device against its
 * prediction with robust outlier and off-prediction flags, split summaries,
 * the main-effects estimate of every dielectric and treatment level (wafer
 * means as the experimental unit), one-way ANOVA across splits, the
 * failure-analysis list, and the history of level estimates across lots.
 * Reads the store; prints nothing.
 */
#ifndef SPLITLOT_ANALYZE_H
#define SPLITLOT_ANALYZE_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/plan.h"
#include "splitlot/stats.h"
#include "splitlot/store.h"

/* Device flags (bits). */
#define SL_FLAG_OUTLIER        0x01u /* |modified z| from its wafer's median > 3.5 */
#define SL_FLAG_OFF_PREDICTION 0x02u /* outside the 99.7 % prediction interval */
#define SL_FLAG_FIT_CLASS      0x04u /* extraction failed (short, open, ...) */
#define SL_FLAG_UNMEASURED     0x08u /* probed, no neutrality point reported */
#define SL_FLAG_BELOW_FLOOR    0x10u /* fitted n0 below the thermal floor at the view's
                                        temperature: the fit or the temperature is wrong */
#define SL_FLAG_HYSTERESIS     0x20u /* |hysteresis| above the plan's device.max_hysteresis_V */
#define SL_FLAG_LOW_MOBILITY   0x40u /* mobility's modified z within its split < -3.5 */

/* Share of censored devices in a split above which the output warns. */
#define SL_ANALYZE_CENSORED_WARN 0.10
/* Level of the effect intervals and the verdicts. */
#define SL_ANALYZE_ALPHA 0.05

/* Half-width of the interval about a dielectric's expected mobility outside
 * which a split's median mobility is off plan, in the plan's sigmas. */
#define SL_ANALYZE_MOBILITY_SIGMAS 3.0

/* Half-width of the off-prediction interval in combined sigmas (99.7 %). */
#define SL_ANALYZE_INTERVAL_SIGMAS 3.0

typedef struct {
    long device_id;
    const char *wafer, *device;  /* owned by the analysis */
    long die_x, die_y;
    long split;                  /* index into plan->splits */
    const char *fit_class;       /* "ok", "unmeasured", "short", ... */
    double cnp_predicted_V, cnp_predicted_sigma_V;
    double cnp_measured_V;       /* NaN when not usable */
    double deviation_V;          /* measured - predicted */
    double z;                    /* deviation / sqrt(pred sigma^2 + device spread^2);
                                    +/-inf when both are 0 and the deviation is not */
    double modified_z;           /* of its residual from its wafer's median, with
                                    the MAD pooled over its dielectric's wafers */
    double doping_measured_per_cm2; /* -C_g V / e with the split's planned C_g */
    double mobility_cm2_per_Vs;
    double mobility_modified_z;  /* 0.6745 (mu - split median) / split MAD over the
                                    split's usable devices; NaN when not scored
                                    (no mobility, not usable, fewer than 5) */
    long n_points;               /* of its stored sweep; 0 for results rows */
    unsigned flags;
    double severity;             /* for ordering the failure-analysis list */
    char reason[192];            /* the flag in words; "" when not flagged */
    /* the measurement shown (the newest of the view) and its device */
    long run_id;
    long measurements;           /* the device's measurements in the view */
    const char *fit_model;       /* "symmetric", "two-mobility", with "/qc" when
                                    fitted with the charge balance; "" for results */
    double n0_per_cm2, r_contact_ohm, hysteresis_V;   /* NaN when not measured */
    /* The residual density expected at the view's temperature: the stored
     * thermal floor n_th and the plan's disorder density n* combined in
     * quadrature, sqrt(n_th^2 + n*^2) (a common approximation, the way n0
     * and n_g combine in the transfer curve); n_th alone without n*. */
    double floor_predicted_per_cm2;
    double channel_length_um, channel_width_um;       /* the device's, else the plan's */
    double electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs; /* the two-mobility
                                    fit's own (NaN for the symmetric model) */
} sl_analyze_device;

typedef struct {
    size_t split;
    size_t n_devices, n_usable;  /* usable: measured, extraction ok */
    size_t n_censored;           /* neutrality point beyond the sweep */
    size_t n_wafers;             /* wafers with a mean */
    double cnp_predicted_V, cnp_predicted_sigma_V;
    sl_stats_summary cnp;        /* of the wafer means of V_cnp (n = wafers):
                                    mean of wafer means, their SD, 95 % CI by
                                    Student t with wafers - 1 df (NaN with
                                    one wafer) */
    double spread_V;             /* device spread about the wafer medians: its
                                    dielectric's pooled MAD / 0.6745 */
    double bias_V;               /* mean - predicted */
    /* The interval outside which a device is flagged off-prediction:
     * predicted +/- SL_ANALYZE_INTERVAL_SIGMAS sqrt(sigma_pred^2 +
     * spread^2), spread as above. */
    double flag_low_V, flag_high_V;
    /* The carrier-density window within the split's gate range: predicted
     * (stored: electrons n - p at the top end, holes p - n at the bottom,
     * from the predicted V_cnp) and reached (the same from the measured mean
     * V_cnp, by the charge balance at the view's temperature; NaN without
     * a mean), cm^-2; and the share of the devices with a fitted or
     * censored V_cnp whose neutrality point stayed inside the sweep. */
    double window_predicted_per_cm2[2], window_reached_per_cm2[2]; /* electrons, holes */
    double inside_share;
    int prediction_in_ci;
    size_t n_flagged;
    /* Over the split's usable devices that have the value: the median and
     * the robust spread 1.4826 MAD (MAD = median |x - median|, scaled to
     * estimate a normal sigma); NaN when no device has the value. */
    double mobility_median_cm2_per_Vs, mobility_spread_cm2_per_Vs;
    double n0_median_per_cm2, n0_spread_per_cm2;
    double hysteresis_median_V, hysteresis_spread_V;
    /* The plan's expected mobility of the split's dielectric (NaN without
     * one), and the judgement of the measured median against it: 1 when
     * it lies outside mean +/- SL_ANALYZE_MOBILITY_SIGMAS sigma, 0 inside,
     * -1 not judged (no expectation or no mobility measured). */
    double mobility_expected_cm2_per_Vs, mobility_expected_sigma_cm2_per_Vs;
    int mobility_off_plan;
} sl_analyze_split;

typedef struct {
    const char *factor, *level, *reference;  /* owned by the plan */
    int is_intercept;            /* baseline + reference levels */
    double planned_per_cm2, planned_sigma_per_cm2;  /* difference from reference */
    double estimated_per_cm2, stderr_per_cm2;
    double df;                   /* residual df of the wafer-mean fit; 0: none */
    double ci_low_per_cm2, ci_high_per_cm2; /* 95 %: estimate -/+ t_{0.975, df} SE */
    double tolerance_per_cm2;    /* the plan's, default its sigma */
    sl_stats_verdict_kind verdict; /* of estimate - planned against the tolerance */
    int off_plan;                /* flagged: verdict off-plan or differs */
    size_t n_wafers;             /* wafers at this level with usable devices */
} sl_analyze_effect;

typedef struct sl_analysis {
    sl_store_lot lot;
    sl_plan *plan;
    sl_analyze_device *devices; /* NULL in a stream's summary */
    size_t n_devices;
    sl_analyze_split *splits;
    size_t n_splits;
    sl_analyze_effect *effects;
    size_t n_effects;
    int effects_status;          /* SL_OK, or why no effects could be estimated */
    char effects_note[256];
    sl_stats_anova anova;        /* of wafer-mean doping across splits,
                                    F(splits - 1, wafers - splits) */
    size_t *flagged;             /* device indices, most severe first; NULL in a
                                    stream's summary */
    size_t n_flagged;
    size_t n_usable;
    size_t n_with_hysteresis;    /* devices with a hysteresis (double sweeps) */
    size_t n_off_plan;           /* levels flagged: off-plan or differs */
    size_t n_verdict[4];         /* levels (not the intercept) per verdict */
    size_t n_censored;           /* devices with V_cnp beyond the sweep */
    size_t n_splits_censored;    /* splits with more than 10 % censored */
    size_t n_wafers_censored_biased; /* wafers with censored devices whose mean
                                    is the plain mean of the rest (no device
                                    scatter to fit with): biased */
    size_t n_outlier_scored;     /* devices the outlier rule scored */
    double outliers_expected;    /* good devices it flags by chance: 2 Q(3.5) n */
    double device_sigma_V;       /* pooled within-wafer SD of V_cnp (NaN: none) */
    double wafer_sigma_per_cm2;  /* wafer-to-wafer SD of doping, from the fit */
    double load_sigma_per_cm2;   /* load-to-load SD of a batched step (REML);
                                    NaN without batches */
    char intercept_name[256];    /* "baseline + <reference levels>", the
                                    intercept effect's level */
    size_t n_splits_cnp_outside; /* splits whose measured mean left the gate range */
    size_t n_splits_mobility_off; /* splits whose median mobility is off plan */
    double *split_gate_min_V, *split_gate_max_V;
    double *split_capacitance_F_per_m2;
    /* the view shown: one step and temperature of the lot's measurement
     * runs, read against the stored revision of its newest run */
    char step[65];
    double temperature_K;
    int revision;                /* number of the plan revision the view is read against */
    double *split_floor_per_cm2; /* stored thermal floor per split at temperature_K */
    sl_store_run *runs;          /* every run of the lot, oldest first */
    size_t n_runs;
    /* the revision the view is read against (its plan text, name and time);
     * lot above is the lot's newest */
    sl_store_lot view_revision;
} sl_analysis;

/* Which measurements an analysis shows: step NULL for the step of the lot's
 * newest run, temperature_K NaN for the plan's first temperature that has a
 * run of that step. */
typedef struct {
    const char *step;
    double temperature_K;
} sl_analyze_view;

/* Analyse a lot of an open store (its newest plan revision and devices), with
 * every device in memory: sl_analyze_lot_stream, then its devices and its
 * failure-analysis order collected.
 * Returns SL_OK, SL_ENOTFOUND (unknown lot, message lists known ones), SL_EDB,
 * SL_ENOMEM. A lot without usable devices analyses to empty summaries. */
sl_status sl_analyze_lot(sl_analysis **out, sl_store *store, const char *lot, sl_diag *diag);
/* The same for one view (NULL: the defaults). A temperature the plan does
 * not list is SL_EINPUT naming the plan's. */
sl_status sl_analyze_lot_view(sl_analysis **out, sl_store *store, const char *lot,
                              const sl_analyze_view *view, sl_diag *diag);
void sl_analysis_free(sl_analysis *analysis);

/* ---- the same analysis in flat memory, whatever the lot's size ---- */

typedef struct sl_analysis_stream sl_analysis_stream;

/* Analyse a lot in passes over its devices, holding state per wafer, split
 * and dielectric only. The devices on the plan's wafers are copied, wafer by
 * wafer in the order of sl_store_load_devices, into the store's scratch (a
 * temporary table in a file); one pass over their usable V_cnp gives each
 * wafer's count and range, more passes each wafer's exact median and each
 * dielectric's MAD of the residuals from the wafer medians
 * (sl_stats_median_search); a last pass scores every device, lists the
 * flagged ones by severity in the scratch, keeps each wafer's running
 * moments of its usable non-outliers and the bounds of its devices beyond
 * the sweep (read from their stored sweeps); then, with the wafer as the
 * unit, the wafer means (censored-normal maximum likelihood where needed),
 * split summaries, the ANOVA of wafer means, the effects and verdicts.
 * The results are those of sl_analyze_lot: the summary has everything but
 * the devices, which are read back one at a time, in the same order, with
 * sl_analysis_stream_next_device, and the failure-analysis list with
 * sl_analysis_stream_next_flagged. The store stays open, reading one
 * snapshot of the database, until sl_analysis_stream_free.
 * Returns as sl_analyze_lot; SL_EINPUT when the devices read differently
 * from one pass to the next. */
sl_status sl_analyze_lot_stream(sl_analysis_stream **out, sl_store *store, const char *lot,
                                sl_diag *diag);
sl_status sl_analyze_lot_stream_view(sl_analysis_stream **out, sl_store *store, const char *lot,
                                     const sl_analyze_view *view, sl_diag *diag);

/* Everything but the devices: devices and flagged are NULL, the counts set. */
const sl_analysis *sl_analysis_stream_summary(const sl_analysis_stream *stream);

/* The next device (as sl_analyze_lot's devices[i], in that order), valid
 * until the next call on the stream; NULL after the last, and the next call
 * starts over. Returns SL_OK, SL_EDB. */
sl_status sl_analysis_stream_next_device(sl_analysis_stream *stream,
                                         const sl_analyze_device **device, sl_diag *diag);

/* The next flagged device, most severe first (then by wafer and device
 * name), with its reason; NULL after the last, as above. */
sl_status sl_analysis_stream_next_flagged(sl_analysis_stream *stream,
                                          const sl_analyze_device **device, sl_diag *diag);

/* Start both readings over. */
void sl_analysis_stream_rewind(sl_analysis_stream *stream);
void sl_analysis_stream_free(sl_analysis_stream *stream);

/* Flag names of a device, in a fixed order, into names (at most 7); returns
 * the count: "outlier", "off-prediction", the fit class, "unmeasured",
 * "below-floor", "hysteresis", "low-mobility". */
int sl_analyze_flag_names(const sl_analyze_device *device, const char **names);

/* ---- history across lots ---- */

typedef struct {
    const char *lot;             /* owned by the history */
    const char *created_utc;
    double estimated_per_cm2, stderr_per_cm2;
    int drift;                   /* outside the limits of the lots before it */
    double lcl_per_cm2, ucl_per_cm2; /* those limits; NaN for the first lot */
} sl_history_point;

typedef struct {
    char *factor, *level, *reference;
    int is_intercept;
    double planned_per_cm2, planned_sigma_per_cm2; /* from the newest lot's plan */
    sl_history_point *points;    /* in lot creation order */
    size_t n_points;
    sl_stats_pooled pooled;      /* random-effects pool (DerSimonian and Laird)
                                    of the lots that did not drift: value, SE
                                    including tau, tau the between-lot sigma */
    sl_stats_ichart chart;       /* the chart shown: centre = pooled value,
                                    limits centre -/+ 3 sqrt(tau^2 + SE^2 +
                                    SE_pooled^2) for a lot of the median SE
                                    (each lot was judged with its own SE);
                                    mr_bar unused */
    size_t n_drift;
} sl_history_level;

typedef struct sl_history {
    sl_history_level *levels;
    size_t n_levels;
    size_t n_lots;               /* lots with effect estimates */
    char **lot_names;            /* every lot, creation order */
    char **lot_created;
    size_t n_lot_names;
    sl_plan *newest_plan;        /* for calibrated YAML */
    double wafer_sigma_per_cm2;  /* RMS over the lots of their wafer sigma */
    double device_sigma_V;       /* RMS over the lots of their device sigma */
    double batch_sigma_per_cm2;  /* RMS over the lots with batches of their load
                                    sigma; NaN when none had batches */
    double wafer_var_sum, device_var_sum, batch_var_sum;
    size_t n_wafer_sigma, n_device_sigma, n_batch_sigma;
} sl_history;

/* Effects of every lot in the store, grouped by level. */
sl_status sl_analyze_history(sl_history **out, sl_store *store, sl_diag *diag);
/* The same with every lot read in one view (NULL: each lot's defaults). */
sl_status sl_analyze_history_view(sl_history **out, sl_store *store, const sl_analyze_view *view,
                                  sl_diag *diag);
void sl_history_free(sl_history *history);

/* Calibrated plan YAML (baseline, dielectrics with layers, treatments) from
 * the pooled estimates, sigma sqrt(tau^2 + SE^2), and a `variation` block
 * of the measured wafer and device scatter, into a malloc'd string. */
sl_status sl_history_emit_yaml(char **yaml, const sl_history *history);

#endif
