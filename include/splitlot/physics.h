/* SPDX-License-Identifier: MIT
 * Carrier physics of a graphene channel under a gate: density of states,
 * electron and hole densities at a Fermi level and temperature, thermal floor,
 * quantum capacitance, gate stacks, the charge-balance solve of the Fermi level
 * for a gate voltage, and the built-in dielectric material table.
 * SI units throughout (J, m^-2, F/m^2, K, V); conversions live in units.h.
 * Pure functions of numbers and no I/O; the density table is the one object
 * that allocates.
 */
#ifndef SPLITLOT_PHYSICS_H
#define SPLITLOT_PHYSICS_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/units.h"

/* Density of states D(E) = 2|E| / (pi (hbar v_F)^2), spin x valley = 4,
 * in states per J per m^2. Castro Neto et al., Rev. Mod. Phys. 81, 109 (2009). */
double sl_physics_dos_per_J_m2(double energy_J, double fermi_velocity_m_s);

/* Electron density n(mu, T) = (2/pi)(k_B T / hbar v_F)^2 F1(mu / k_B T) in m^-2,
 * F1 the complete Fermi-Dirac integral of order 1 (GSL). Exact T = 0 branch:
 * n = mu^2/(pi (hbar v_F)^2) for mu > 0, else 0. Valid for T >= 0 and finite mu.
 * Fang et al., Appl. Phys. Lett. 91, 092109 (2007). */
double sl_physics_electron_density_per_m2(double mu_J, double temperature_K,
                                          double fermi_velocity_m_s);

/* Hole density p(mu, T) = n(-mu, T), m^-2. */
double sl_physics_hole_density_per_m2(double mu_J, double temperature_K,
                                      double fermi_velocity_m_s);

/* Net density n - p in m^-2 (positive = electrons), computed without the
 * cancellation of n - p at large |mu| through F1(x) + F1(-x) = x^2/2 + pi^2/6. */
double sl_physics_net_density_per_m2(double mu_J, double temperature_K,
                                     double fermi_velocity_m_s);

/* Thermal floor n_th = n = p at mu = 0: (pi/6)(k_B T / hbar v_F)^2, m^-2. */
double sl_physics_thermal_floor_per_m2(double temperature_K, double fermi_velocity_m_s);

/* Quantum capacitance C_q = e^2 d(n - p)/d mu
 *   = (2 e^2 k_B T / (pi (hbar v_F)^2)) ln[2 (1 + cosh(mu / k_B T))], F/m^2;
 * T = 0 limit 2 e^2 |mu| / (pi (hbar v_F)^2). Fang et al. 2007. */
double sl_physics_quantum_capacitance_F_per_m2(double mu_J, double temperature_K,
                                               double fermi_velocity_m_s);

/* One layer of a gate stack, SI. */
typedef struct {
    double relative_permittivity;
    double thickness_m;
    double thickness_sigma_m;   /* one-sigma thickness variation, >= 0 */
    double breakdown_V_per_m;   /* breakdown field of the material */
} sl_layer;

/* Series capacitance per area 1/C_g = sum t_i/(eps0 eps_i), F/m^2 (textbook).
 * Returns 0 for an empty or non-physical stack. */
double sl_physics_stack_capacitance_F_per_m2(const sl_layer *layers, size_t count);

/* Equivalent oxide thickness EOT = 3.9 sum t_i/eps_i, m. */
double sl_physics_stack_eot_m(const sl_layer *layers, size_t count);

/* Relative one-sigma uncertainty of C_g from the thickness sigmas,
 * sigma_C/C = sqrt(sum (sigma_t_i/eps_i)^2) / sum(t_i/eps_i) (first order). */
double sl_physics_stack_capacitance_rel_sigma(const sl_layer *layers, size_t count);

/* Safe gate voltage magnitude f * min_i(eps_i E_bd,i) * sum(t_i/eps_i), V:
 * the field in the weakest layer reaches f times its breakdown field.
 * The derating f (0.5 by default in plans) is common practice, not a law. */
double sl_physics_stack_safe_gate_V(const sl_layer *layers, size_t count, double derating);

/* Charge balance: solve C_g (V_g - V_cnp) = e (n - p)(mu, T) + C_g mu / e for the
 * Fermi level mu (J), by GSL Brent on a bracket that always holds the single root,
 * then one Newton polish. Domain: C_g > 0, T >= 0, finite voltages.
 * Returns SL_OK, SL_EINPUT for a bad domain, SL_ENUM if the solver fails. */
sl_status sl_physics_solve_fermi_J(double *mu_J, double gate_V, double cnp_V,
                                   double gate_capacitance_F_per_m2,
                                   double temperature_K, double fermi_velocity_m_s);

/* Residual of the charge balance at mu, relative to C_g |V_g - V_cnp| (absolute
 * in V when V_g = V_cnp). Used by tests and for fit diagnostics. */
double sl_physics_charge_balance_residual(double mu_J, double gate_V, double cnp_V,
                                          double gate_capacitance_F_per_m2,
                                          double temperature_K, double fermi_velocity_m_s);

/* Net carrier density against gate offset, tabulated once for one gate
 * stack and temperature so that a fit can ask for it at every point of every
 * iteration: the charge balance above is solved (GSL Brent) on a grid
 * uniform in s = sqrt(|x|), x = V_g - V_cnp, and the Fermi level in volts
 * u(x) = mu / e is interpolated by cubic Hermite polynomials in s with the
 * exact slopes du/dx = C_g / (C_g + C_q) (u is odd: tabulated for x >= 0),
 * its slope linearly between the nodes' exact ones.
 * The net density is n - p = C_g (x - u(x)) / e and its slope C_g (1 -
 * u'(x)) / e, the gate efficiency (C_g/e) C_q/(C_g + C_q). Beyond the table
 * the balance is solved directly. The only allocating object of this
 * module; read-only once made, so one table serves any number of threads. */
typedef struct sl_physics_density_table sl_physics_density_table;

/* Table for |V_g - V_cnp| up to max_offset_V (> 0) on a stack of C_g at
 * temperature_K (> 0) with Fermi velocity v_F. SL_OK, SL_EINPUT for a bad
 * domain, SL_ENOMEM, SL_ENUM if a solve fails. */
sl_status sl_physics_density_table_new(sl_physics_density_table **out,
                                       double gate_capacitance_F_per_m2, double temperature_K,
                                       double fermi_velocity_m_s, double max_offset_V);
void sl_physics_density_table_free(sl_physics_density_table *table);

/* Gate offset converted to charge, y = e (n - p) / C_g in V, at the offset
 * x = V_g - V_cnp in V, with dy/dx = C_q / (C_g + C_q) into *slope (may be
 * NULL). The short form of the density is y = x, slope 1. */
double sl_physics_density_table_charge_V(const sl_physics_density_table *table, double offset_V,
                                         double *slope);

/* The same at the n offsets gate_V[i] - cnp_V, into charge_V[i] and
 * slope[i] (slope may be NULL): one call per sweep and model evaluation. */
void sl_physics_density_table_charge_n(const sl_physics_density_table *table, double *charge_V,
                                       double *slope, const double *gate_V, double cnp_V,
                                       size_t n);

/* What the table was made for. */
double sl_physics_density_table_capacitance_F_per_m2(const sl_physics_density_table *table);
double sl_physics_density_table_temperature_K(const sl_physics_density_table *table);

/* Gate efficiency dn/dV_g = (C_g/e) C_q/(C_g + C_q), m^-2 V^-1 (series capacitance). */
double sl_physics_gate_efficiency_per_m2_V(double mu_J, double temperature_K,
                                           double gate_capacitance_F_per_m2,
                                           double fermi_velocity_m_s);

/* Disorder crossover temperature T* where n_th(T*) = n*:
 * T* = (hbar v_F / k_B) sqrt(6 n* / pi), K. */
double sl_physics_disorder_crossover_K(double disorder_density_per_m2,
                                       double fermi_velocity_m_s);

/* Neutrality voltage V_cnp = -e N / C_g for a net doping N (m^-2, positive =
 * n-type), with sigma_V^2 = (e sigma_N / C_g)^2 + (V_cnp sigma_C/C)^2. */
sl_est sl_physics_cnp_V(sl_est doping_per_m2, double gate_capacitance_F_per_m2,
                        double capacitance_rel_sigma);

/* A dielectric material: relative permittivity and breakdown field. */
typedef struct {
    const char *name;
    double relative_permittivity;
    double breakdown_MV_per_cm;
} sl_material;

/* Built-in table of typical handbook values (not measurements of any one film). */
size_t sl_physics_material_count(void);
const sl_material *sl_physics_material_at(size_t index);
/* Case-sensitive lookup; NULL when unknown. */
const sl_material *sl_physics_material_find(const char *name);

/* Parse a stack written "MATERIAL:THICKNESS_NM[:SIGMA_NM],..." (top layer
 * first) with materials from the built-in table, into at most max layers.
 * Returns SL_OK or SL_EINPUT with one message in diag (unknown material with a
 * did-you-mean, bad thickness, malformed item). */
sl_status sl_physics_stack_parse(sl_layer *layers, size_t max, size_t *count,
                                 const char *spec, sl_diag *diag);

/* Turn GSL's abort-on-error handler off; call once at start-up (idempotent). */
void sl_physics_init(void);

#endif
