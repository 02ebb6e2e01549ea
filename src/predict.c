/* SPDX-License-Identifier: MIT
 * Per split and temperature predictions (see include/splitlot/predict.h):
 * composes physics.h functions over a plan's stacks, dopings and temperatures.
 */
#include "splitlot/predict.h"

#include <math.h>
#include <stdlib.h>

#include "splitlot/physics.h"

#define SL_MAX_LAYERS 32

sl_status sl_predict_gate_capacitance(double *capacitance_F_per_m2, double *rel_sigma,
                                      double *eot_nm, const sl_plan *plan,
                                      size_t dielectric)
{
    sl_layer layers[SL_MAX_LAYERS];
    size_t n = 0;
    sl_status st = sl_plan_stack(plan, dielectric, layers, SL_MAX_LAYERS, &n);
    if (st != SL_OK)
        return st;
    *capacitance_F_per_m2 = sl_physics_stack_capacitance_F_per_m2(layers, n);
    if (rel_sigma)
        *rel_sigma = sl_physics_stack_capacitance_rel_sigma(layers, n);
    if (eot_nm)
        *eot_nm = sl_physics_stack_eot_m(layers, n) / SL_M_PER_NM;
    return *capacitance_F_per_m2 > 0.0 ? SL_OK : SL_EINPUT;
}

void sl_predict_gate_range(double *min_V, double *max_V, int *from_plan,
                           const sl_plan *plan, size_t dielectric)
{
    const sl_plan_dielectric *d = &plan->dielectrics[dielectric];
    if (d->has_gate_range) {
        *min_V = d->gate_range_V[0];
        *max_V = d->gate_range_V[1];
        *from_plan = 1;
        return;
    }
    sl_layer layers[SL_MAX_LAYERS];
    size_t n = 0;
    double safe = 0.0;
    if (sl_plan_stack(plan, dielectric, layers, SL_MAX_LAYERS, &n) == SL_OK)
        safe = sl_physics_stack_safe_gate_V(layers, n, plan->gate_derating);
    *min_V = -safe;
    *max_V = safe;
    *from_plan = 0;
}

/* Fermi level (eV) and net density (cm^-2) at one gate voltage. */
static sl_status point_at_gate(double *fermi_eV, double *net_per_cm2, double gate_V,
                               double cnp_V, double cg, double t_K, double vf)
{
    double mu = 0.0;
    sl_status st = sl_physics_solve_fermi_J(&mu, gate_V, cnp_V, cg, t_K, vf);
    if (st != SL_OK)
        return st;
    *fermi_eV = mu / SL_SI_ELEMENTARY_CHARGE;
    *net_per_cm2 = sl_physics_net_density_per_m2(mu, t_K, vf) * SL_PER_CM2_PER_PER_M2;
    return SL_OK;
}

static sl_status fill_window(sl_prediction *p, double vf)
{
    double net_max = 0.0, net_min = 0.0;
    double cg = p->gate_capacitance_F_per_m2, t = p->temperature_K;
    sl_status st = point_at_gate(&p->fermi_at_gate_max_eV, &net_max, p->gate_max_V,
                                 p->cnp_V.val, cg, t, vf);
    if (st == SL_OK)
        st = point_at_gate(&p->fermi_at_gate_min_eV, &net_min, p->gate_min_V,
                           p->cnp_V.val, cg, t, vf);
    p->max_electron_density_per_cm2 = net_max;
    p->max_hole_density_per_cm2 = -net_min;
    return st;
}

static sl_status predict_one(sl_prediction *p, const sl_plan *plan, size_t split, size_t temp)
{
    const sl_plan_split *s = &plan->splits[split];
    double vf = plan->fermi_velocity_m_s;
    p->split = split;
    p->temperature_K = plan->temperatures_K[temp];
    sl_status st = sl_predict_gate_capacitance(&p->gate_capacitance_F_per_m2,
                                               &p->capacitance_rel_sigma, &p->eot_nm, plan,
                                               s->dielectric);
    if (st != SL_OK)
        return st;
    double cg = p->gate_capacitance_F_per_m2;
    p->doping_per_cm2 = sl_plan_split_doping_per_cm2(plan, split);
    sl_est doping_m2 = { p->doping_per_cm2.val * SL_PER_M2_PER_PER_CM2,
                         p->doping_per_cm2.sigma * SL_PER_M2_PER_PER_CM2 };
    p->cnp_V = sl_physics_cnp_V(doping_m2, cg, p->capacitance_rel_sigma);
    sl_predict_gate_range(&p->gate_min_V, &p->gate_max_V, &p->gate_range_from_plan, plan,
                          s->dielectric);
    p->cnp_in_range = p->cnp_V.val >= p->gate_min_V && p->cnp_V.val <= p->gate_max_V;
    double nth = sl_physics_thermal_floor_per_m2(p->temperature_K, vf);
    p->thermal_floor_per_cm2 = nth * SL_PER_CM2_PER_PER_M2;
    p->thermal_floor_V = SL_SI_ELEMENTARY_CHARGE * nth / cg;
    p->gate_efficiency_per_cm2_V =
        sl_physics_gate_efficiency_per_m2_V(0.0, p->temperature_K, cg, vf) * SL_PER_CM2_PER_PER_M2;
    p->disorder_crossover_K = sl_physics_disorder_crossover_K(
        plan->disorder_density_per_cm2 * SL_PER_M2_PER_PER_CM2, vf);
    return fill_window(p, vf);
}

sl_status sl_predict_plan(sl_prediction **out, size_t *count, const sl_plan *plan,
                          sl_diag *diag)
{
    *out = NULL;
    *count = 0;
    size_t n = plan->n_splits * plan->n_temperatures;
    sl_prediction *all = calloc(n ? n : 1, sizeof *all);
    if (!all)
        return SL_ENOMEM;
    for (size_t s = 0; s < plan->n_splits; s++)
        for (size_t t = 0; t < plan->n_temperatures; t++) {
            sl_status st = predict_one(&all[s * plan->n_temperatures + t], plan, s, t);
            if (st != SL_OK) {
                sl_diag_add(diag, SL_SEV_ERROR, plan->path, 0, 0,
                            "split '%s' at %g K: prediction failed (%s)", plan->splits[s].name,
                            plan->temperatures_K[t], sl_status_str(st));
                free(all);
                return st;
            }
        }
    *out = all;
    *count = n;
    return SL_OK;
}
