/* SPDX-License-Identifier: MIT
 * Transfer-curve fitter: one gate sweep R(V_g) of a graphene FET in, the
 * neutrality point, mobility, residual density and contact resistance out
 * with standard errors, or a class saying why the device cannot be fitted.
 * Not for: reading files or grouping points per device (ingest.h does that).
 */
#ifndef SPLITLOT_FIT_H
#define SPLITLOT_FIT_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/physics.h"
#include "splitlot/units.h"

/* What a sweep turned out to be. Only SL_FIT_OK carries fitted parameters. */
typedef enum {
    SL_FIT_OK = 0,
    SL_FIT_SHORT,          /* resistance tiny everywhere, or flat and small */
    SL_FIT_OPEN,           /* a reading at or above open_min_ohm, or not finite */
    SL_FIT_CNP_OUTSIDE,    /* neutrality point outside the swept gate range */
    SL_FIT_NO_CONVERGENCE, /* the least-squares search did not converge */
    SL_FIT_POOR            /* no gate response, or the model does not describe it */
} sl_fit_class;

#define SL_FIT_CLASS_COUNT 6

/* Stable names used in the database and reports: "ok", "short", "open",
 * "cnp-outside-sweep", "no-convergence", "poor-fit"; "?" for a bad value. */
const char *sl_fit_class_name(sl_fit_class cls);

/* Name back to class; SL_OK, or SL_EINPUT for an unknown name. */
sl_status sl_fit_class_parse(sl_fit_class *out, const char *name);

/* How the least-squares problem is searched. Both minimise the same sum of
 * squared relative residuals with R_c >= 0 and give the same answer to well
 * within the standard errors; PROJECTED needs starting values for two
 * parameters only, takes fewer steps and is faster (tests/bench/bench_fit.c). */
typedef enum {
    SL_FIT_METHOD_PROJECTED = 0, /* variable projection over (V_cnp, n0); the
                                    full search as fallback if it fails */
    SL_FIT_METHOD_FULL           /* all four parameters at once (R_c = rho^2,
                                    mu and n0 through logarithms) */
} sl_fit_method;

/* Which transfer-curve model is fitted. */
typedef enum {
    SL_FIT_MODEL_SYMMETRIC = 0, /* one mobility for electrons and holes */
    SL_FIT_MODEL_TWO_MOBILITY   /* electrons and holes each with their own mobility
                                   (see sl_fit_model_two_mobility_ohm) */
} sl_fit_model;

/* Which carrier density a fit takes for the gate (see sl_fit_params). */
typedef enum {
    SL_FIT_DENSITY_CHARGE_BALANCE = 0, /* charge balance with quantum capacitance */
    SL_FIT_DENSITY_SHORT               /* n_g = C_g (V_g - V_cnp) / e, for comparison */
} sl_fit_density_model;

/* Device geometry, gate and classification thresholds. */
typedef struct {
    double gate_capacitance_F_per_m2; /* C_g per area, > 0 */
    double length_over_width;         /* channel L/W, > 0 */
    double short_max_ohm;       /* every reading below: short (default 50) */
    double short_flat_max_ohm;  /* median below this and flat: short (default 500) */
    double open_min_ohm;        /* any reading at or above: open (default 1e9) */
    double min_modulation;      /* smoothed max/min - 1 below this: no gate
                                   response, flat (default 0.05) */
    double poor_max_rel_rms;    /* RMS of relative residuals above: poor (0.05) */
    double poor_min_r_squared;  /* R^2 below: poor (default 0.9) */
    int max_iterations;         /* trust-region iterations per search (100) */
    sl_fit_method method;       /* default SL_FIT_METHOD_PROJECTED */
    sl_fit_model model;         /* default SL_FIT_MODEL_SYMMETRIC */
    /* Carrier density of the gate: the charge balance with quantum
     * capacitance at the device's temperature, from a table made for this
     * C_g (sl_physics_density_table_new; the caller keeps it alive while
     * fitting), or NULL for the short form n_g = C_g (V_g - V_cnp) / e,
     * which overstates n_g on thin high-k stacks (default NULL). */
    const sl_physics_density_table *density_table;
} sl_fit_config;

/* Name of the density model a config fits with: "qc" (charge balance with
 * quantum capacitance) or "short"; stored beside the fit model. */
const char *sl_fit_density_model_name(const sl_fit_config *cfg);

/* Defaults for a channel of the given size on a gate of capacitance C_g.
 * The thresholds are common practice for two-terminal graphene sweeps, not
 * published values: a channel below 50 ohm is metal, not graphene; 1 Gohm
 * is a typical source-meter overload; a fit within 5 % RMS and R^2 >= 0.9
 * describes a curve well at the usual 0.1-1 % instrument noise. */
void sl_fit_config_default(sl_fit_config *cfg, double gate_capacitance_F_per_m2,
                           double channel_length_um, double channel_width_um);

/* Parameters of R(V_g) = R_c + (L/W) / (e mu sqrt(n0^2 + n_g^2)), n_g the
 * net density the gate induces: from the charge balance with quantum
 * capacitance, or the short form C_g (V_g - V_cnp) / e (see
 * sl_fit_config.density_table; Kim et al., Appl. Phys. Lett. 94, 062107
 * (2009)). */
typedef struct {
    double cnp_V;               /* neutrality point V_cnp */
    double mobility_cm2_per_Vs; /* effective mobility mu */
    double n0_per_cm2;          /* residual density n0 */
    double r_contact_ohm;       /* contact resistance R_c, >= 0 */
} sl_fit_params;

/* Result of one sweep. For any class but SL_FIT_OK, p and sigma are NaN;
 * rel_rms and r_squared are set when a fit was made (else NaN). */
typedef struct {
    sl_fit_class cls;
    sl_fit_params p;       /* mobility: the geometric mean sqrt(mu_e mu_h) */
    sl_fit_params sigma;   /* one-standard-error of each parameter */
    /* Electron and hole mobilities and their ratio mu_e / mu_h, with standard
     * errors; in the symmetric model both equal p.mobility and the ratio is
     * {1, 0}. NaN unless SL_FIT_OK. */
    sl_est electron_mobility_cm2_per_Vs;
    sl_est hole_mobility_cm2_per_Vs;
    sl_est electron_hole_mobility_ratio;
    double rel_rms;        /* RMS of (R_meas - R_fit) / R_meas */
    double r_squared;      /* 1 - SS_res / SS_tot on resistance */
    int iterations;        /* trust-region iterations spent */
    size_t n_points;       /* points given */
    size_t n_spikes;       /* points left out as instrument spikes (see below) */
} sl_fit_result;

/* Scratch space for sweeps of up to max_points points; reuse it for every
 * device (one per thread): fitting then allocates nothing except when the
 * sweep length changes. NULL when out of memory or max_points < 8. */
typedef struct sl_fit_workspace sl_fit_workspace;
sl_fit_workspace *sl_fit_workspace_new(size_t max_points);
void sl_fit_workspace_free(sl_fit_workspace *ws);

/* Fewest points a sweep may have. */
#define SL_FIT_MIN_POINTS 8

/* Fit one sweep (points in any order, repeated voltages allowed, e.g. a
 * forward and a backward sweep). ws must come from sl_fit_workspace_new;
 * call sl_physics_init() once per process before fitting, so GSL reports
 * its errors instead of aborting. Thread-safe with one ws per thread.
 *
 * Classes, in the order they are decided: open (any reading >= open_min_ohm
 * or not finite); short (all below short_max_ohm, or flat with a median below
 * short_flat_max_ohm); poor (a reading <= 0, or flat: no gate response);
 * cnp-outside-sweep (highest at an end of the sweep and rising steadily
 * towards it, |Spearman rho| >= 0.8; noise peaking at an end is poor); then
 * the fit: no-convergence, poor (a dip instead of a peak, rel_rms above
 * poor_max_rel_rms or R^2 below poor_min_r_squared), cnp-outside-sweep
 * (fitted V_cnp outside [min vg_V, max vg_V]), else ok.
 *
 * Method: variable projection. R_c and K = (L/W)/(C_g mu) enter linearly and
 * are solved by least squares at every (V_cnp, n0); those two (and ln(mu_e /
 * mu_h) in the two-mobility model) are searched by GSL's trust region with
 * Levenberg-Marquardt steps and the Kaufman Jacobian: with two or three
 * parameters a step is a tiny solve, and the damping copes with the flat
 * valley of n0 when the peak is sharp. Start: the peak of the raw or the
 * moving-median curve (whichever fits better), n0 from its half width.
 * R_c >= 0 is kept by refitting with R_c = 0 when the free optimum is
 * negative. Residuals are relative (weight 1/R), as meter errors scale with
 * the reading. Standard errors come from the covariance of all parameters
 * (J^T J)^-1 scaled by the residual variance chi^2 / (n - p).
 * Spikes: when a fit is poor only because of a few points (at most 2 %, at
 * least one) whose relative residual exceeds 10 robust standard deviations
 * (1.4826 MAD), they are left out once and the sweep fitted again; their
 * number is reported in n_spikes (common practice for instrument glitches).
 *
 * Returns SL_OK with *out filled (check out->cls), SL_EINPUT for fewer than
 * SL_FIT_MIN_POINTS or more than the workspace's points, a non-finite gate
 * voltage, a sweep without two distinct voltages, or a bad config (a density
 * table made for another C_g among them); SL_ENOMEM. */
sl_status sl_fit_sweep(sl_fit_result *out, sl_fit_workspace *ws, const sl_fit_config *cfg,
                       const double *vg_V, const double *r_ohm, size_t n_points);

/* Double sweeps: a forward and a reverse branch of one device, fitted each on
 * its own. Where the gate voltage of a sweep in file order turns back: the
 * index of the first point of the second branch when the voltage runs one
 * way and then the other, turning exactly once (repeated voltages, such as
 * the end point measured twice, do not count as a turn); 0 for a sweep that
 * runs one way only or turns more than once. */
size_t sl_fit_sweep_turn(const double *vg_V, size_t n_points);

typedef struct {
    int is_double;        /* two branches of at least SL_FIT_MIN_POINTS each */
    sl_fit_result forward, reverse; /* each branch's fit (is_double only) */
    double hysteresis_V;  /* V_cnp(reverse) - V_cnp(forward); NaN unless both ok */
    /* The device: a single sweep's fit; for a double sweep, when both
     * branches are ok, each parameter the mean of the two branches, its
     * standard error half the root sum of squares (independent branches),
     * rel_rms the larger, r_squared the smaller, spikes and iterations
     * summed; else the first branch that is not ok, as it is. */
    sl_fit_result device;
} sl_fit_double_result;

/* Fit a sweep that may be a double sweep. direction (NULL, or per point +1
 * forward, -1 reverse, 0 unknown) splits the points when it names both
 * branches; without it sl_fit_sweep_turn decides. A branch with fewer than
 * SL_FIT_MIN_POINTS points, or points with no direction among named ones,
 * make the sweep a single one, fitted whole. Statuses of sl_fit_sweep. */
sl_status sl_fit_double_sweep(sl_fit_double_result *out, sl_fit_workspace *ws,
                              const sl_fit_config *cfg, const double *vg_V, const double *r_ohm,
                              const signed char *direction, size_t n_points);

/* The model resistance in ohm at gate voltage vg_V (for simulation and
 * report curves), with the config's density model. */
double sl_fit_model_ohm(const sl_fit_params *p, const sl_fit_config *cfg, double vg_V);

/* The same at a given gate-induced net density n_g (m^-2), however it was
 * found (a simulation solves the charge balance at every point). */
double sl_fit_model_at_density_ohm(const sl_fit_params *p, const sl_fit_config *cfg,
                                   double net_density_per_m2);

/* The two-mobility variant: electrons and holes take the densities
 * n, p = (n_t +- n_g) / 2 of n_t = sqrt(n0^2 + n_g^2) (n - p = n_g as the
 * gate demands; the split of the residual n0 evenly between them is this
 * program's phenomenological choice, not a published law) and conduct in
 * parallel: R = R_c + (L/W) / (e (n mu_e + p mu_h)), n_g from the config's
 * density model. With mu = p->mobility
 * the geometric mean and ratio = mu_e / mu_h (> 0):
 * n mu_e + p mu_h = n_t mu (cosh(ln(ratio)/2) + (n_g/n_t) sinh(ln(ratio)/2)).
 * Ratio 1 gives sl_fit_model_ohm exactly. */
double sl_fit_model_two_mobility_ohm(const sl_fit_params *p, double electron_hole_mobility_ratio,
                                     const sl_fit_config *cfg, double vg_V);

#endif
