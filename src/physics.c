/* SPDX-License-Identifier: MIT
 * Carrier physics of graphene under a gate (see include/splitlot/physics.h).
 * Special functions come from GSL (Fermi-Dirac integral, ln cosh) and the
 * charge balance is solved with GSL's Brent bracketing solver.
 */
#include "splitlot/physics.h"
#include "splitlot/text.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
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

/* ---- the density table ---- */

/* Grid step in s = sqrt(|x|) (V^1/2): at most this, and at most an eighth
 * of sqrt(k_B T / e), the scale over which the Fermi level turns from linear
 * in x (C_q = C_q(0) near neutrality) to sqrt-like; the node count is
 * capped. With these the interpolated Fermi level stays within 1e-6 of the
 * offset (1 nV below 1 mV) of the solved one, and the slope within 2e-3
 * (checked in tests/test_physics.c). */
#define SL_DENSITY_TABLE_MAX_STEP 0.005
#define SL_DENSITY_TABLE_MAX_NODES 65536

/* Doubles per interval of the grid: the Hermite cubic of the Fermi level
 * as a polynomial in the fraction f of the interval, u = c0 + f (c1 + f (c2
 * + f c3)), then du/dx at both nodes as e0 + f e1, and padding to a 64-byte
 * row, so a lookup reads one cache line. */
#define SL_DENSITY_ROW 8

struct sl_physics_density_table {
    double cg, temperature_K, vf, max_offset_V;
    double step, inv_step;   /* grid step in s */
    size_t nodes;
    double *u, *du_ds;       /* Fermi level (V) and its slope in s at s = k step */
    double *du_dx;           /* and in x, C_g / (C_g + C_q) */
    double *rows;            /* SL_DENSITY_ROW per interval k .. k + 1 */
};

void sl_physics_density_table_free(sl_physics_density_table *table)
{
    if (!table)
        return;
    free(table->u);
    free(table->du_ds);
    free(table->du_dx);
    free(table->rows);
    free(table);
}

/* The rows from the nodes: with m = step du/ds the Hermite basis of the
 * cubic (1 + 2f)(1 - f)^2 u0 + f (1 - f)^2 m0 + f^2 (3 - 2f) u1 - f^2 (1 - f)
 * m1, multiplied out. */
static void fill_density_rows(sl_physics_density_table *t)
{
    for (size_t k = 0; k + 1 < t->nodes; k++) {
        double u0 = t->u[k], u1 = t->u[k + 1];
        double m0 = t->step * t->du_ds[k], m1 = t->step * t->du_ds[k + 1];
        double *row = t->rows + k * SL_DENSITY_ROW;
        row[0] = u0;
        row[1] = m0;
        row[2] = 3.0 * (u1 - u0) - 2.0 * m0 - m1;
        row[3] = 2.0 * (u0 - u1) + m0 + m1;
        row[4] = t->du_dx[k];
        row[5] = t->du_dx[k + 1] - t->du_dx[k];
        row[6] = row[7] = 0.0;
    }
}

/* du/dx = C_g / (C_g + C_q) at the Fermi level u (V): the balance's slope. */
static double fermi_slope(const sl_physics_density_table *t, double u_V)
{
    double cq = sl_physics_quantum_capacitance_F_per_m2(SL_SI_ELEMENTARY_CHARGE * u_V,
                                                        t->temperature_K, t->vf);
    return t->cg / (t->cg + cq);
}

/* The balance of sl_physics_solve_fermi_J in volts and its slope
 * 1 + C_q/C_g, for GSL's derivative solvers. */
static double balance_slope(double u_V, void *p)
{
    const balance_params *b = p;
    return 1.0 + sl_physics_quantum_capacitance_F_per_m2(SL_SI_ELEMENTARY_CHARGE * u_V,
                                                         b->temperature_K, b->vf) / b->cg;
}

static void balance_both(double u_V, void *p, double *f, double *df)
{
    *f = balance_V(u_V, p);
    *df = balance_slope(u_V, p);
}

/* The Fermi level at offset x by GSL's Newton solver from the guess (the
 * previous node carried along its slope: a few steps suffice), or by the
 * bracketing Brent solve when Newton does not settle. */
static sl_status table_node_V(double *u, gsl_root_fdfsolver *newton, balance_params *b,
                              double guess)
{
    gsl_function_fdf fdf = { balance_V, balance_slope, balance_both, b };
    if (gsl_root_fdfsolver_set(newton, &fdf, guess) == GSL_SUCCESS) {
        double before = guess;
        for (int iter = 0; iter < 20; iter++) {
            if (gsl_root_fdfsolver_iterate(newton) != GSL_SUCCESS)
                break;
            double now = gsl_root_fdfsolver_root(newton);
            if (gsl_root_test_delta(now, before, 0.0, 4.0 * DBL_EPSILON) == GSL_SUCCESS) {
                *u = now;
                return SL_OK;
            }
            before = now;
        }
    }
    double mu = 0.0;
    sl_status st = sl_physics_solve_fermi_J(&mu, b->dv, 0.0, b->cg, b->temperature_K, b->vf);
    *u = mu / SL_SI_ELEMENTARY_CHARGE;
    return st;
}

/* The Fermi level and its slope in s at every node s_k = k step,
 * x_k = s_k^2. */
static sl_status fill_density_table(sl_physics_density_table *t)
{
    gsl_root_fdfsolver *newton = gsl_root_fdfsolver_alloc(gsl_root_fdfsolver_newton);
    if (!newton)
        return SL_ENOMEM;
    sl_status st = SL_OK;
    double u = 0.0, slope = fermi_slope(t, 0.0), x_before = 0.0;
    t->u[0] = t->du_ds[0] = 0.0;
    t->du_dx[0] = slope;
    for (size_t k = 1; k < t->nodes && st == SL_OK; k++) {
        double s = t->step * (double)k;
        balance_params b = { t->cg, t->temperature_K, t->vf, s * s };
        st = table_node_V(&u, newton, &b, u + slope * (b.dv - x_before));
        slope = fermi_slope(t, u);
        x_before = b.dv;
        t->u[k] = u;
        t->du_ds[k] = 2.0 * s * slope;
        t->du_dx[k] = slope;
    }
    gsl_root_fdfsolver_free(newton);
    return st;
}

sl_status sl_physics_density_table_new(sl_physics_density_table **out,
                                       double gate_capacitance_F_per_m2, double temperature_K,
                                       double fermi_velocity_m_s, double max_offset_V)
{
    *out = NULL;
    if (!(gate_capacitance_F_per_m2 > 0.0) || !(temperature_K > 0.0) ||
        !isfinite(temperature_K) || !(fermi_velocity_m_s > 0.0) || !(max_offset_V > 0.0) ||
        !isfinite(max_offset_V))
        return SL_EINPUT;
    sl_physics_density_table *t = calloc(1, sizeof *t);
    if (!t)
        return SL_ENOMEM;
    double thermal_V = SL_SI_BOLTZMANN * temperature_K / SL_SI_ELEMENTARY_CHARGE;
    double s_max = sqrt(max_offset_V);
    double step = fmin(SL_DENSITY_TABLE_MAX_STEP, sqrt(thermal_V) / 8.0);
    size_t intervals = (size_t)ceil(s_max / step);
    if (intervals < 2)
        intervals = 2;
    if (intervals > SL_DENSITY_TABLE_MAX_NODES - 1)
        intervals = SL_DENSITY_TABLE_MAX_NODES - 1;
    *t = (sl_physics_density_table){ .cg = gate_capacitance_F_per_m2,
                                      .temperature_K = temperature_K, .vf = fermi_velocity_m_s,
                                      .max_offset_V = max_offset_V,
                                      .step = s_max / (double)intervals,
                                      .nodes = intervals + 1 };
    t->inv_step = 1.0 / t->step;
    t->u = malloc(t->nodes * sizeof *t->u);
    t->du_ds = malloc(t->nodes * sizeof *t->du_ds);
    t->du_dx = malloc(t->nodes * sizeof *t->du_dx);
    t->rows = malloc(t->nodes * SL_DENSITY_ROW * sizeof *t->rows);
    sl_status st = t->u && t->du_ds && t->du_dx && t->rows ? fill_density_table(t) : SL_ENOMEM;
    if (st == SL_OK)
        fill_density_rows(t);
    if (st != SL_OK) {
        sl_physics_density_table_free(t);
        return st;
    }
    *out = t;
    return SL_OK;
}

/* Beyond the table: the balance solved at this offset, the slope from C_q. */
static double charge_V_direct(const sl_physics_density_table *t, double offset_V, double *slope)
{
    double mu = 0.0;
    if (sl_physics_solve_fermi_J(&mu, offset_V, 0.0, t->cg, t->temperature_K, t->vf) != SL_OK)
        mu = NAN;
    double u = mu / SL_SI_ELEMENTARY_CHARGE;
    if (slope)
        *slope = 1.0 - fermi_slope(t, u);
    return offset_V - u;
}

/* Cubic Hermite interpolation in s = sqrt(|x|) with the solved slopes at
 * both nodes, where the lookup is one multiplication on the uniform grid:
 * GSL's interpolation types take no given slopes and look an abscissa up
 * by bisection, which cost more than the rest of a fit's model evaluation.
 * In s the Fermi level is smooth at both ends: u ~ s^2 near neutrality at
 * T > 0 and u ~ s where C_q << C_g, where a grid in x would need ever finer
 * steps. */
static inline double table_charge_in_reach_V(const sl_physics_density_table *t, double offset_V,
                                             double *slope)
{
    double x = fabs(offset_V);
    double s = sqrt(x), pos = s * t->inv_step;
    size_t k = (size_t)pos;
    if (k > t->nodes - 2)
        k = t->nodes - 2;
    double f = pos - (double)k;
    const double *row = t->rows + k * SL_DENSITY_ROW;
    double u = row[0] + f * (row[1] + f * (row[2] + f * row[3]));
    /* the slope linear between the nodes' exact ones: it serves Jacobians,
     * where an error of order step^2 only moves the path of a search, and
     * it spares a division (the costliest step of this function) */
    if (slope)
        *slope = 1.0 - (row[4] + f * row[5]);
    return copysign(x - u, offset_V);
}

static inline double table_charge_V(const sl_physics_density_table *t, double offset_V,
                                    double *slope)
{
    if (!(fabs(offset_V) <= t->max_offset_V))
        return charge_V_direct(t, offset_V, slope);
    return table_charge_in_reach_V(t, offset_V, slope);
}

/* Beyond the table within a sweep: the balance solved by GSL's Newton
 * solver from the zero-temperature root, which temperature only moves a
 * little (it adds carriers at a given Fermi level), with Brent's bracketing
 * solve when Newton does not settle (table_node_V); one solver, made on the
 * first such point, serves all the points of the call (*newton). */
static double charge_V_newton(const sl_physics_density_table *t, gsl_root_fdfsolver **newton,
                              double offset_V, double *slope)
{
    if (!*newton && isfinite(offset_V))
        *newton = gsl_root_fdfsolver_alloc(gsl_root_fdfsolver_newton);
    if (!*newton || !isfinite(offset_V))
        return charge_V_direct(t, offset_V, slope);
    balance_params b = { t->cg, t->temperature_K, t->vf, offset_V };
    double u = NAN;
    if (table_node_V(&u, *newton, &b, zero_t_root_V(offset_V, t->cg, t->vf)) != SL_OK)
        u = NAN;
    if (slope)
        *slope = 1.0 - fermi_slope(t, u);
    return offset_V - u;
}

double sl_physics_density_table_charge_V(const sl_physics_density_table *t, double offset_V,
                                         double *slope)
{
    return table_charge_V(t, offset_V, slope);
}

void sl_physics_density_table_charge_n(const sl_physics_density_table *t, double *charge_V,
                                       double *slope, const double *gate_V, double cnp_V,
                                       size_t n)
{
    gsl_root_fdfsolver *newton = NULL;
    if (slope)
        for (size_t i = 0; i < n; i++) {
            double offset_V = gate_V[i] - cnp_V;
            charge_V[i] = fabs(offset_V) <= t->max_offset_V
                              ? table_charge_in_reach_V(t, offset_V, &slope[i])
                              : charge_V_newton(t, &newton, offset_V, &slope[i]);
        }
    else
        for (size_t i = 0; i < n; i++) {
            double offset_V = gate_V[i] - cnp_V;
            charge_V[i] = fabs(offset_V) <= t->max_offset_V
                              ? table_charge_in_reach_V(t, offset_V, NULL)
                              : charge_V_newton(t, &newton, offset_V, NULL);
        }
    if (newton)
        gsl_root_fdfsolver_free(newton);
}

double sl_physics_density_table_capacitance_F_per_m2(const sl_physics_density_table *t)
{
    return t->cg;
}

double sl_physics_density_table_temperature_K(const sl_physics_density_table *t)
{
    return t->temperature_K;
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
