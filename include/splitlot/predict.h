/* SPDX-License-Identifier: MIT
 * Predictions per split and temperature from a validated plan: gate stack,
 * planned doping, neutrality voltage with its uncertainty, safe gate range and
 * the density window inside it, thermal floor and disorder crossover.
 * Pure computation over physics.h; storing and printing are elsewhere.
 */
#ifndef SPLITLOT_PREDICT_H
#define SPLITLOT_PREDICT_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/plan.h"
#include "splitlot/units.h"

typedef struct {
    size_t split;                        /* index into plan->splits */
    double temperature_K;
    double gate_capacitance_F_per_m2;
    double capacitance_rel_sigma;
    double eot_nm;
    sl_est doping_per_cm2;               /* baseline + dielectric + treatments */
    sl_est cnp_V;                        /* -e N / C_g with propagated sigma */
    double gate_min_V, gate_max_V;       /* plan's range, else +/- derated safe */
    int gate_range_from_plan;
    double max_electron_density_per_cm2; /* n - p at gate_max (>= 0 when reachable) */
    double max_hole_density_per_cm2;     /* p - n at gate_min (>= 0 when reachable) */
    double fermi_at_gate_min_eV, fermi_at_gate_max_eV;
    double gate_efficiency_per_cm2_V;    /* dn/dV_g at the neutrality point */
    double thermal_floor_per_cm2;
    double thermal_floor_V;              /* e n_th / C_g: the floor in gate volts */
    double disorder_crossover_K;         /* 0 when the plan gives no disorder */
    int cnp_in_range;
} sl_prediction;

/* Predictions for every split x temperature of a validated plan, split-major
 * (count = n_splits * n_temperatures), in a malloc'd array the caller frees.
 * Returns SL_OK, SL_EINPUT (a stack the plan check would refuse), SL_ENUM
 * (charge balance failed), SL_ENOMEM. */
sl_status sl_predict_plan(sl_prediction **out, size_t *count, const sl_plan *plan,
                          sl_diag *diag);

/* Gate capacitance and its relative sigma of a dielectric of the plan. */
sl_status sl_predict_gate_capacitance(double *capacitance_F_per_m2, double *rel_sigma,
                                      double *eot_nm, const sl_plan *plan,
                                      size_t dielectric);

/* The gate range used for a dielectric: the plan's, else +/- derated safe voltage. */
void sl_predict_gate_range(double *min_V, double *max_V, int *from_plan,
                           const sl_plan *plan, size_t dielectric);

#endif
