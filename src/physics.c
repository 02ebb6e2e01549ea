/* SPDX-License-Identifier: MIT
 * Carrier physics of graphene under a gate (see include/splitlot/physics.h).
 * Special functions come from GSL (Fermi-Dirac integral, ln cosh) and the
 * charge balance is solved with GSL's Brent bracketing solver.
 */
#include "splitlot/physics.h"
#include "splitlot/text.h"

#include <float.h>
#include <math.h>
#include <string.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_roots.h>
#include <gsl/gsl_sf_fermi_dirac.h>
#include <gsl/gsl_sf_log.h>
#include <gsl/gsl_sf_trig.h>

/* F1(x) below this is smaller than 1e-300 and negligible next to x^2/2. */
#define SL_F1_NEGLIGIBLE_X (-690.0)
/* Below this mu/kT the net density uses its Taylor series (see below). */
#define SL_NET_SERIES_MAX_X 1.0e-3

void sl_physics_init(void) { gsl_set_error_handler_off(); }

static double hbar_vf(double fermi_velocity_m_s) { return SL_SI_HBAR * fermi_velocity_m_s; }

double sl_physics_dos_per_J_m2(double energy_J, double fermi_velocity_m_s)
{
    double hv = hbar_vf(fermi_velocity_m_s);
    return 2.0 * fabs(energy_J) / (M_PI * hv * hv);
}

/* F1(x) via GSL, with underflow at very negative x read as 0. */
static double fermi_dirac_1(double x)
{
    if (x < SL_F1_NEGLIGIBLE_X)
        return 0.0;
    gsl_sf_result r;
    int st = gsl_sf_fermi_dirac_1_e(x, &r);
    return (st == GSL_SUCCESS) ? r.val : (st == GSL_EUNDRFLW ? 0.0 : r.val);
}

/* (2/pi)(k_B T / hbar v_F)^2: the density scale of F1. */
static double thermal_density_scale(double temperature_K, double fermi_velocity_m_s)
{
    double r = SL_SI_BOLTZMANN * temperature_K / hbar_vf(fermi_velocity_m_s);
    return (2.0 / M_PI) * r * r;
}

static double zero_t_density(double mu_J, double fermi_velocity_m_s)
{
    if (mu_J <= 0.0)
        return 0.0;
    double hv = hbar_vf(fermi_velocity_m_s);
    return mu_J * mu_J / (M_PI * hv * hv);
}

double sl_physics_electron_density_per_m2(double mu_J, double temperature_K,
                                          double fermi_velocity_m_s)
{
    if (temperature_K <= 0.0)
        return zero_t_density(mu_J, fermi_velocity_m_s);
    double kt = SL_SI_BOLTZMANN * temperature_K;
    return thermal_density_scale(temperature_K, fermi_velocity_m_s) * fermi_dirac_1(mu_J / kt);
}

double sl_physics_hole_density_per_m2(double mu_J, double temperature_K,
                                      double fermi_velocity_m_s)
{
    return sl_physics_electron_density_per_m2(-mu_J, temperature_K, fermi_velocity_m_s);
}

double sl_physics_net_density_per_m2(double mu_J, double temperature_K,
                                     double fermi_velocity_m_s)
{
    double hv = hbar_vf(fermi_velocity_m_s);
    double sign = mu_J < 0.0 ? -1.0 : 1.0;
    if (temperature_K <= 0.0)
        return sign * mu_J * mu_J / (M_PI * hv * hv);
    double x = fabs(mu_J) / (SL_SI_BOLTZMANN * temperature_K);
    /* n - p = scale (F1(x) - F1(-x)) = scale (x^2/2 + pi^2/6 - 2 F1(-x)); near
     * x = 0 that difference of O(1) numbers loses digits, so use its Taylor
     * series there (F1' = F0 = ln(1 + e^x)): 2 ln2 x + x^3/12 - x^5/480 + ...,
     * truncated with relative error below 2e-15 for x < 1e-3 */
    double bracket = x < SL_NET_SERIES_MAX_X
                         ? 2.0 * M_LN2 * x + x * x * x / 12.0
                         : 0.5 * x * x + M_PI * M_PI / 6.0 - 2.0 * fermi_dirac_1(-x);
    return sign * thermal_density_scale(temperature_K, fermi_velocity_m_s) * bracket;
}

double sl_physics_thermal_floor_per_m2(double temperature_K, double fermi_velocity_m_s)
{
    double r = SL_SI_BOLTZMANN * temperature_K / hbar_vf(fermi_velocity_m_s);
    return (M_PI / 6.0) * r * r;
}

double sl_physics_quantum_capacitance_F_per_m2(double mu_J, double temperature_K,
                                               double fermi_velocity_m_s)
{
    double hv = hbar_vf(fermi_velocity_m_s);
    double e2 = SL_SI_ELEMENTARY_CHARGE * SL_SI_ELEMENTARY_CHARGE;
    if (temperature_K <= 0.0)
        return 2.0 * e2 * fabs(mu_J) / (M_PI * hv * hv);
    double kt = SL_SI_BOLTZMANN * temperature_K;
    /* ln[2(1 + cosh x)] = ln[4 cosh^2(x/2)] = 2 ln 2 + 2 ln cosh(x/2), overflow-free */
    double log_term = 2.0 * M_LN2 + 2.0 * gsl_sf_lncosh(0.5 * mu_J / kt);
    return 2.0 * e2 * kt / (M_PI * hv * hv) * log_term;
}

double sl_physics_stack_capacitance_F_per_m2(const sl_layer *layers, size_t count)
{
    double inv = 0.0;
    for (size_t i = 0; i < count; i++) {
        if (!(layers[i].thickness_m > 0.0) || !(layers[i].relative_permittivity > 0.0))
            return 0.0;
        inv += layers[i].thickness_m / (SL_SI_EPS0 * layers[i].relative_permittivity);
    }
    return inv > 0.0 ? 1.0 / inv : 0.0;
}

static double sum_t_over_eps(const sl_layer *layers, size_t count)
{
    double s = 0.0;
    for (size_t i = 0; i < count; i++)
        s += layers[i].thickness_m / layers[i].relative_permittivity;
    return s;
}

double sl_physics_stack_eot_m(const sl_layer *layers, size_t count)
{
    return 3.9 * sum_t_over_eps(layers, count);
}

double sl_physics_stack_capacitance_rel_sigma(const sl_layer *layers, size_t count)
{
    double var = 0.0;
    for (size_t i = 0; i < count; i++) {
        double s = layers[i].thickness_sigma_m / layers[i].relative_permittivity;
        var += s * s;
    }
    double total = sum_t_over_eps(layers, count);
    return total > 0.0 ? sqrt(var) / total : 0.0;
}

double sl_physics_stack_safe_gate_V(const sl_layer *layers, size_t count, double derating)
{
    if (count == 0)
        return 0.0;
    double weakest = INFINITY; /* smallest eps_i E_bd,i: displacement field limit */
    for (size_t i = 0; i < count; i++) {
        double d = layers[i].relative_permittivity * layers[i].breakdown_V_per_m;
        if (d < weakest)
            weakest = d;
    }
    return derating * weakest * sum_t_over_eps(layers, count);
}

/* The balance in volts: f(u) = (e/C_g)(n - p)(e u) + u - dV, increasing in u. */
typedef struct {
    double cg, temperature_K, vf, dv;
} balance_params;

static double balance_V(double u_V, void *p)
{
    const balance_params *b = p;
    double net = sl_physics_net_density_per_m2(SL_SI_ELEMENTARY_CHARGE * u_V, b->temperature_K, b->vf);
    return SL_SI_ELEMENTARY_CHARGE * net / b->cg + u_V - b->dv;
}

/* Root of the T = 0 balance a u|u| + u = dV, a = e^2/(C_g pi (hbar v)^2): the
 * outer end of the bracket, since temperature only adds carriers at fixed u. */
static double zero_t_root_V(double dv, double cg, double vf)
{
    double hv = hbar_vf(vf);
    double a = SL_SI_ELEMENTARY_CHARGE * SL_SI_ELEMENTARY_CHARGE / (cg * M_PI * hv * hv);
    double mag = 2.0 * fabs(dv) / (1.0 + sqrt(1.0 + 4.0 * a * fabs(dv)));
    return dv < 0.0 ? -mag : mag;
}

static sl_status brent_V(double *root, balance_params *b, double lo, double hi)
{
    gsl_function fn = { balance_V, b };
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    if (!s)
        return SL_ENOMEM;
    sl_status st = SL_ENUM;
    if (gsl_root_fsolver_set(s, &fn, lo, hi) == GSL_SUCCESS) {
        for (int iter = 0; iter < 200; iter++) {
            if (gsl_root_fsolver_iterate(s) != GSL_SUCCESS)
                break;
            double a = gsl_root_fsolver_x_lower(s), c = gsl_root_fsolver_x_upper(s);
            if (gsl_root_test_interval(a, c, 0.0, 4.0 * DBL_EPSILON) == GSL_SUCCESS) {
                st = SL_OK;
                break;
            }
        }
        *root = gsl_root_fsolver_root(s);
    }
    gsl_root_fsolver_free(s);
    return st;
}

sl_status sl_physics_solve_fermi_J(double *mu_J, double gate_V, double cnp_V,
                                   double gate_capacitance_F_per_m2,
                                   double temperature_K, double fermi_velocity_m_s)
{
    if (!(gate_capacitance_F_per_m2 > 0.0) || !(temperature_K >= 0.0) ||
        !(fermi_velocity_m_s > 0.0) || !isfinite(gate_V) || !isfinite(cnp_V) ||
        !isfinite(temperature_K))
        return SL_EINPUT;
    balance_params b = { gate_capacitance_F_per_m2, temperature_K, fermi_velocity_m_s,
                         gate_V - cnp_V };
    if (b.dv == 0.0) {
        *mu_J = 0.0;
        return SL_OK;
    }
    double outer = zero_t_root_V(b.dv, b.cg, b.vf);
    double f_outer = balance_V(outer, &b);
    if (f_outer == 0.0) {
        *mu_J = SL_SI_ELEMENTARY_CHARGE * outer;
        return SL_OK;
    }
    /* rounding can leave the T = 0 root a hair short: widen to u = dV, where
     * f = (e/C_g)(n - p) has the sign of dV for sure */
    if ((f_outer < 0.0) == (b.dv > 0.0))
        outer = b.dv;
    double lo = b.dv > 0.0 ? 0.0 : outer, hi = b.dv > 0.0 ? outer : 0.0;
    double u;
    sl_status st = brent_V(&u, &b, lo, hi);
    if (st != SL_OK)
        return st;
    /* one Newton step with the analytic slope f'(u) = 1 + C_q/C_g */
    double slope = 1.0 + sl_physics_quantum_capacitance_F_per_m2(SL_SI_ELEMENTARY_CHARGE * u,
                                                                temperature_K, b.vf) / b.cg;
    double polished = u - balance_V(u, &b) / slope;
    if (polished >= lo && polished <= hi && fabs(balance_V(polished, &b)) <= fabs(balance_V(u, &b)))
        u = polished;
    *mu_J = SL_SI_ELEMENTARY_CHARGE * u;
    return SL_OK;
}

double sl_physics_charge_balance_residual(double mu_J, double gate_V, double cnp_V,
                                          double gate_capacitance_F_per_m2,
                                          double temperature_K, double fermi_velocity_m_s)
{
    balance_params b = { gate_capacitance_F_per_m2, temperature_K, fermi_velocity_m_s,
                         gate_V - cnp_V };
    double r = balance_V(mu_J / SL_SI_ELEMENTARY_CHARGE, &b);
    return b.dv != 0.0 ? fabs(r / b.dv) : fabs(r);
}

double sl_physics_gate_efficiency_per_m2_V(double mu_J, double temperature_K,
                                           double gate_capacitance_F_per_m2,
                                           double fermi_velocity_m_s)
{
    double cq = sl_physics_quantum_capacitance_F_per_m2(mu_J, temperature_K, fermi_velocity_m_s);
    double cg = gate_capacitance_F_per_m2;
    if (cg + cq <= 0.0)
        return 0.0;
    return (cg / SL_SI_ELEMENTARY_CHARGE) * cq / (cg + cq);
}

double sl_physics_disorder_crossover_K(double disorder_density_per_m2,
                                       double fermi_velocity_m_s)
{
    if (!(disorder_density_per_m2 > 0.0))
        return 0.0;
    return hbar_vf(fermi_velocity_m_s) / SL_SI_BOLTZMANN *
           sqrt(6.0 * disorder_density_per_m2 / M_PI);
}

sl_est sl_physics_cnp_V(sl_est doping_per_m2, double gate_capacitance_F_per_m2,
                        double capacitance_rel_sigma)
{
    sl_est v = { 0.0, 0.0 };
    if (!(gate_capacitance_F_per_m2 > 0.0))
        return v;
    double e_over_c = SL_SI_ELEMENTARY_CHARGE / gate_capacitance_F_per_m2;
    v.val = -e_over_c * doping_per_m2.val;
    v.sigma = hypot(e_over_c * doping_per_m2.sigma, v.val * capacitance_rel_sigma);
    return v;
}

/* Typical handbook values (relative permittivity, breakdown field in MV/cm);
 * real films vary with deposition, so plans may override them. */
static const sl_material material_table[] = {
    { "SiO2", 3.9, 10.0 },  { "Al2O3", 9.0, 7.0 }, { "HfO2", 20.0, 5.0 },
    { "hBN", 3.5, 8.0 },    { "Si3N4", 7.5, 8.0 }, { "Y2O3", 15.0, 5.0 },
    { "ZrO2", 22.0, 4.0 },
};

size_t sl_physics_material_count(void)
{
    return sizeof material_table / sizeof material_table[0];
}

const sl_material *sl_physics_material_at(size_t index)
{
    return index < sl_physics_material_count() ? &material_table[index] : NULL;
}

const sl_material *sl_physics_material_find(const char *name)
{
    if (!name)
        return NULL;
    for (size_t i = 0; i < sl_physics_material_count(); i++)
        if (strcmp(material_table[i].name, name) == 0)
            return &material_table[i];
    return NULL;
}

/* " (did you mean 'X'?)" for the built-in material nearest to name, or "". */
static const char *material_hint(char *buf, size_t size, const char *name)
{
    const char *names[sizeof material_table / sizeof material_table[0]];
    for (size_t i = 0; i < sl_physics_material_count(); i++)
        names[i] = material_table[i].name;
    return sl_text_did_you_mean(buf, size, name, names, sl_physics_material_count());
}

static sl_status parse_layer(sl_layer *layer, char *item, sl_diag *diag)
{
    char *save = NULL;
    char *name = strtok_r(item, ":", &save);
    char *thick = strtok_r(NULL, ":", &save);
    char *sigma = strtok_r(NULL, ":", &save);
    if (!name || !thick || strtok_r(NULL, ":", &save)) {
        sl_diag_error(diag, "stack item '%s' is not MATERIAL:THICKNESS_NM[:SIGMA_NM]", item);
        return SL_EINPUT;
    }
    const sl_material *m = sl_physics_material_find(name);
    if (!m) {
        char hint[96];
        sl_diag_error(diag, "unknown material '%s'%s", name, material_hint(hint, sizeof hint, name));
        return SL_EINPUT;
    }
    char *end;
    double t = strtod(thick, &end);
    if (*end || !(t > 0.0) || !isfinite(t)) {
        sl_diag_error(diag, "thickness '%s' of %s must be a positive number of nm", thick, name);
        return SL_EINPUT;
    }
    double s = 0.0;
    if (sigma) {
        s = strtod(sigma, &end);
        if (*end || !(s >= 0.0) || !isfinite(s)) {
            sl_diag_error(diag, "thickness sigma '%s' of %s must be a number of nm >= 0", sigma, name);
            return SL_EINPUT;
        }
    }
    layer->relative_permittivity = m->relative_permittivity;
    layer->thickness_m = t * SL_M_PER_NM;
    layer->thickness_sigma_m = s * SL_M_PER_NM;
    layer->breakdown_V_per_m = m->breakdown_MV_per_cm * SL_V_PER_M_PER_MV_CM;
    return SL_OK;
}

sl_status sl_physics_stack_parse(sl_layer *layers, size_t max, size_t *count,
                                 const char *spec, sl_diag *diag)
{
    *count = 0;
    size_t len = spec ? strlen(spec) : 0;
    if (len == 0 || len > 4096) {
        sl_diag_error(diag, "stack is empty or too long; expected MATERIAL:THICKNESS_NM,...");
        return SL_EINPUT;
    }
    char buf[4097];
    memcpy(buf, spec, len + 1);
    if (buf[0] == ',' || buf[len - 1] == ',' || strstr(buf, ",,")) {
        sl_diag_error(diag, "stack '%s' has an empty item", spec);
        return SL_EINPUT;
    }
    char *save = NULL;
    for (char *item = strtok_r(buf, ",", &save); item; item = strtok_r(NULL, ",", &save)) {
        if (*count == max) {
            sl_diag_error(diag, "stack has more than %zu layers", max);
            return SL_EINPUT;
        }
        sl_status st = parse_layer(&layers[*count], item, diag);
        if (st != SL_OK)
            return st;
        (*count)++;
    }
    return SL_OK;
}
