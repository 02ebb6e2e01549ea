/* SPDX-License-Identifier: MIT
 * Synthetic lots for demos, tests and benchmarks, drawn from a plan's own
 * model: true level dopings (the planned means, drawn from the plan's sigmas
 * on request, or set by overrides), per-wafer layer thicknesses, per-load,
 * per-wafer and per-device doping scatter from the plan's variation block,
 * mobility, residual density and contact
 * resistance, measurement noise, and a few faulty devices of each kind.
 * Sweeps follow the transfer curve with the gate's density from the charge
 * balance with quantum capacitance, solved at every point at the
 * measurement temperature.
 * Writes results.csv, sweeps.csv and the truth (truth.csv, levels.csv).
 */
#ifndef SPLITLOT_SIMULATE_H
#define SPLITLOT_SIMULATE_H

#include <stdint.h>

#include "splitlot/error.h"
#include "splitlot/layout.h"
#include "splitlot/plan.h"

/* A level whose true doping is set instead of drawn (e.g. a treatment that
 * under-delivers): level name (dielectric or treatment) and value. */
typedef struct {
    const char *level;
    double doping_per_cm2;
} sl_simulate_override;

typedef struct {
    uint64_t seed;
    long points_per_sweep;         /* default 201 */
    double noise_rel;              /* multiplicative noise of R, default 0.005 */
    double fault_fraction;         /* devices made faulty, default 0.02 */
    double shifted_fraction;       /* good devices given an odd extra shift, default 0.005 */
    double shift_V;                /* that extra shift, default 3 V */
    double wafer_doping_sigma_per_cm2; /* wafer-to-wafer scatter for a plan without
                                          a variation block, default 1e11 */
    long devices_per_wafer;        /* 0: the plan's */
    int write_sweeps;              /* write sweeps.csv (default on) */
    int draw_levels;               /* draw each level's true doping from the plan's
                                      sigma (default off: the planned mean) */
    double only_temperature_K;     /* measure at this plan temperature only (0, the
                                      default: at every temperature of the plan) */
    const sl_simulate_override *overrides;
    size_t n_overrides;
} sl_simulate_options;

void sl_simulate_options_default(sl_simulate_options *opt, uint64_t seed);

typedef struct {
    long wafers, devices, sweep_rows, faulty, shifted;
} sl_simulate_summary;

/* Draw a lot and write the files into the existing folder out_dir: every
 * probed device measured at every temperature of the plan (a temperature_K
 * column), the same neutrality point at each, the residual density with
 * the temperature's thermal floor.
 * Returns SL_OK, SL_EINPUT (an override names no level, only_temperature_K
 * is not a plan temperature), SL_EIO, SL_ENOMEM. */
sl_status sl_simulate_lot(sl_simulate_summary *out, const sl_plan *plan, const sl_layout *layout,
                          const sl_simulate_options *options, const char *out_dir,
                          sl_diag *diag);

#endif
