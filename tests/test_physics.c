/* SPDX-License-Identifier: MIT
 * Unit tests of the carrier physics (src/physics.c) against outside values:
 * mpmath for the Fermi-Dirac integral, published graphene figures, the exact
 * n + p identity, and hand arithmetic for gate stacks.
 */
#include <float.h>
#include <math.h>

#include <gsl/gsl_deriv.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_math.h>

#include "splitlot/physics.h"
#include "test_support.h"

#define VF SL_SI_DEFAULT_FERMI_VELOCITY
#define EV SL_SI_ELEMENTARY_CHARGE
#define KB SL_SI_BOLTZMANN

static double rel_err(double got, double want) { return fabs(got - want) / fabs(want); }

/* n(mu, T) / scale = F1(mu / kT): recovers F1 from the public density function. */
static double f1_via_density(double x)
{
    const double t = 300.0;
    double kt = KB * t, r = kt / (SL_SI_HBAR * VF);
    return sl_physics_electron_density_per_m2(x * kt, t, VF) / ((2.0 / M_PI) * r * r);
}

/* F1(x) = -Li2(-e^x); expected values from mpmath 1.2.1 at 40 digits:
 * mpmath.mp.dps = 40; -mpmath.polylog(2, -mpmath.exp(x)) */
START_TEST(test_f1_against_mpmath)
{
    static const struct { double x, f1; } table[] = {
        { -30.0, 9.3576229688399556921e-14 }, { -10.0, 4.5399414484476335236e-05 },
        { -2.0, 0.13101248471442377127 },     { -0.5, 0.53321727999488125117 },
        { 0.0, 0.82246703342411321824 },      { 0.5, 1.2367167868533451853 },
        { 1.0, 1.8062860704447742567 },       { 2.5, 4.6894747975997616666 },
        { 5.0, 14.138207435970704038 },       { 10.0, 51.64488866743374196 },
        { 20.0, 201.64493406478707282 },      { 40.0, 801.64493406684822643 },
        { 60.0, 1801.6449340668482264 },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        double got = f1_via_density(table[i].x);
        ck_assert_msg(rel_err(got, table[i].f1) < 1e-10, "F1(%g) = %.17g, mpmath %.17g",
                      table[i].x, got, table[i].f1);
    }
}
END_TEST

/* Exact identity n + p = (mu^2 + (pi k T)^2 / 3) / (pi (hbar v)^2), from
 * F1(x) + F1(-x) = x^2/2 + pi^2/6 (docs/physics.md). */
START_TEST(test_total_density_identity)
{
    static const double temps[] = { 0.0, 4.2, 77.0, 300.0, 600.0, 2000.0 };
    static const double mus_eV[] = { -1.0, -0.3, -0.05, -0.001, 0.0, 0.002, 0.07, 0.4, 2.0 };
    double hv = SL_SI_HBAR * VF;
    for (size_t i = 0; i < 6; i++)
        for (size_t j = 0; j < 9; j++) {
            double t = temps[i], mu = mus_eV[j] * EV;
            double sum = sl_physics_electron_density_per_m2(mu, t, VF) +
                         sl_physics_hole_density_per_m2(mu, t, VF);
            double want = (mu * mu + pow(M_PI * KB * t, 2) / 3.0) / (M_PI * hv * hv);
            if (want == 0.0)
                ck_assert(sum == 0.0);
            else
                ck_assert_msg(rel_err(sum, want) < 1e-12, "T=%g mu=%g: %g vs %g", t, mus_eV[j], sum, want);
        }
}
END_TEST

/* Net density n - p from the cancellation-free path agrees with n - p
 * computed directly where the difference is not cancellation-limited. */
START_TEST(test_net_density_consistent)
{
    static const double mus_eV[] = { -0.2, -0.01, 0.0, 0.01, 0.2 };
    for (size_t j = 0; j < 5; j++) {
        double mu = mus_eV[j] * EV, t = 300.0;
        double direct = sl_physics_electron_density_per_m2(mu, t, VF) -
                        sl_physics_hole_density_per_m2(mu, t, VF);
        double net = sl_physics_net_density_per_m2(mu, t, VF);
        ck_assert(fabs(net - direct) <= 1e-12 * fmax(fabs(direct), 1e12));
    }
}
END_TEST

/* Thermal floor: about 8.1e10 cm^-2 at 300 K with v_F = 1e6 m/s
 * (Fang et al., Appl. Phys. Lett. 91, 092109 (2007), Fig. 1 and text). */
START_TEST(test_thermal_floor_300K)
{
    double nth = sl_physics_thermal_floor_per_m2(300.0, VF) * SL_PER_CM2_PER_PER_M2;
    ck_assert_msg(fabs(nth - 8.1e10) < 0.05e10, "n_th = %g", nth);
    /* n = p = n_th at the Dirac point, by definition */
    double n = sl_physics_electron_density_per_m2(0.0, 300.0, VF) * SL_PER_CM2_PER_PER_M2;
    ck_assert(rel_err(n, nth) < 1e-12);
    /* T^2 scaling of the formula (pi/6)(kT/hbar v)^2 */
    ck_assert(rel_err(sl_physics_thermal_floor_per_m2(600.0, VF),
                      4.0 * sl_physics_thermal_floor_per_m2(300.0, VF)) < 1e-14);
}
END_TEST

/* Quantum capacitance about 0.8 uF/cm^2 at the Dirac point at room
 * temperature (Fang et al. 2007); the closed form gives 0.8437. */
START_TEST(test_quantum_capacitance_dirac_300K)
{
    double cq = sl_physics_quantum_capacitance_F_per_m2(0.0, 300.0, VF) * SL_UF_CM2_PER_F_M2;
    ck_assert_msg(fabs(cq - 0.84) < 0.01, "C_q = %g uF/cm^2", cq);
}
END_TEST

typedef struct { double t; } deriv_params;

static double net_density_of_mu(double mu_eV, void *p)
{
    return sl_physics_net_density_per_m2(mu_eV * EV, ((deriv_params *)p)->t, VF);
}

/* C_q = e^2 d(n - p)/d mu: the closed form against GSL's numerical derivative. */
START_TEST(test_quantum_capacitance_is_derivative)
{
    static const double mus_eV[] = { -0.3, -0.02, 0.0, 0.01, 0.15, 0.5 };
    deriv_params p = { 300.0 };
    gsl_function fn = { net_density_of_mu, &p };
    for (size_t j = 0; j < 6; j++) {
        double d, err;
        gsl_deriv_central(&fn, mus_eV[j], 1e-4, &d, &err);
        double cq_numeric = EV * d; /* e^2 dn/dmu with mu in eV: e * dn/d(mu_eV) */
        double cq = sl_physics_quantum_capacitance_F_per_m2(mus_eV[j] * EV, 300.0, VF);
        ck_assert_msg(rel_err(cq, cq_numeric) < 1e-6, "mu=%g: %g vs %g", mus_eV[j], cq, cq_numeric);
    }
}
END_TEST

typedef struct { double mu_J, t; } occupancy_params;

static double dos_times_fermi(double e_J, void *vp)
{
    const occupancy_params *p = vp;
    double kt = KB * p->t, e = e_J * kt; /* e_J is E / kT here */
    double occ = 1.0 / (1.0 + exp((e - p->mu_J) / kt));
    return sl_physics_dos_per_J_m2(e, VF) * occ;
}

/* n = integral_0^inf D(E) f(E) dE by GSL quadrature, against the F1 path:
 * checks the density of states and the density are the same model
 * (Castro Neto et al., Rev. Mod. Phys. 81, 109 (2009), D(E) = 2|E|/(pi (hbar v)^2)). */
START_TEST(test_dos_integrates_to_density)
{
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(1000);
    static const double mus_eV[] = { -0.1, 0.0, 0.05, 0.2 };
    for (size_t j = 0; j < 4; j++) {
        occupancy_params p = { mus_eV[j] * EV, 300.0 };
        gsl_function fn = { dos_times_fermi, &p };
        double integral, err;
        gsl_integration_qagiu(&fn, 0.0, 0.0, 1e-11, 1000, w, &integral, &err);
        integral *= KB * p.t; /* the integrand runs over E in units of k T */
        double n = sl_physics_electron_density_per_m2(p.mu_J, p.t, VF);
        ck_assert_msg(rel_err(integral, n) < 1e-9, "mu=%g: %g vs %g", mus_eV[j], integral, n);
    }
    gsl_integration_workspace_free(w);
}
END_TEST

/* T = 0: exact branch, finite everywhere, no NaN. */
START_TEST(test_zero_temperature)
{
    double hv = SL_SI_HBAR * VF, mu = 0.1 * EV;
    ck_assert(rel_err(sl_physics_electron_density_per_m2(mu, 0.0, VF), mu * mu / (M_PI * hv * hv)) < 1e-15);
    ck_assert(sl_physics_hole_density_per_m2(mu, 0.0, VF) == 0.0);
    ck_assert(sl_physics_electron_density_per_m2(0.0, 0.0, VF) == 0.0);
    ck_assert(sl_physics_thermal_floor_per_m2(0.0, VF) == 0.0);
    ck_assert(sl_physics_quantum_capacitance_F_per_m2(0.0, 0.0, VF) == 0.0);
    ck_assert(isfinite(sl_physics_gate_efficiency_per_m2_V(0.0, 0.0, 1e-3, VF)));
    double mu_solved;
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu_solved, 10.0, 0.0, 3.8e-4, 0.0, VF), SL_OK);
    ck_assert(isfinite(mu_solved) && mu_solved > 0.0);
    /* the low-T limit joins the exact branch continuously */
    ck_assert(rel_err(sl_physics_electron_density_per_m2(mu, 1e-4, VF),
                      sl_physics_electron_density_per_m2(mu, 0.0, VF)) < 1e-12);
}
END_TEST

/* 300 nm SiO2 (eps 3.9): C_g/e about 7.2e10 cm^-2 per volt
 * (Novoselov et al., Science 306, 666 (2004)). */
START_TEST(test_sio2_300nm_density_per_volt)
{
    sl_layer ox = { 3.9, 300e-9, 0.0, 10e8 };
    double cg = sl_physics_stack_capacitance_F_per_m2(&ox, 1);
    double per_volt = cg / EV * SL_PER_CM2_PER_PER_M2;
    ck_assert_msg(fabs(per_volt - 7.2e10) < 0.05e10, "%g cm^-2/V", per_volt);
    /* far from the Dirac point the gate efficiency tends to C_g/e (C_q >> C_g) */
    double mu;
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, 60.0, 0.0, cg, 300.0, VF), SL_OK);
    double eff = sl_physics_gate_efficiency_per_m2_V(mu, 300.0, cg, VF) * SL_PER_CM2_PER_PER_M2;
    ck_assert(eff < per_volt && eff > 0.99 * per_volt);
}
END_TEST

/* Stacks by hand:
 * 90 nm SiO2: C = 8.8541878128e-12 * 3.9 / 90e-9 = 3.83681472e-4 F/m^2 = 38.3681 nF/cm^2.
 * 10 nm HfO2 on 5 nm Al2O3: sum t/eps = 10e-9/20 + 5e-9/9 = 5e-10 + 5.5556e-10
 *   = 1.05556e-9 m; C = eps0 / 1.05556e-9 = 8.38818e-3 F/m^2; EOT = 3.9 * 1.05556e-9
 *   = 4.11667 nm; sigma_C/C with sigmas 0.5 nm, 0.2 nm: sqrt((0.5e-9/20)^2 +
 *   (0.2e-9/9)^2) / 1.05556e-9 = sqrt(6.25e-22 + 4.9383e-22)/1.05556e-9 = 0.0316236. */
START_TEST(test_stack_by_hand)
{
    sl_layer ox = { 3.9, 90e-9, 2e-9, 10e8 };
    ck_assert(rel_err(sl_physics_stack_capacitance_F_per_m2(&ox, 1), 3.83681472e-4) < 1e-8);
    ck_assert(rel_err(sl_physics_stack_eot_m(&ox, 1), 90e-9) < 1e-14);
    ck_assert(rel_err(sl_physics_stack_capacitance_rel_sigma(&ox, 1), 2.0 / 90.0) < 1e-14);
    sl_layer two[] = { { 20.0, 10e-9, 0.5e-9, 5e8 }, { 9.0, 5e-9, 0.2e-9, 7e8 } };
    ck_assert(rel_err(sl_physics_stack_capacitance_F_per_m2(two, 2), 8.38818e-3) < 1e-5);
    ck_assert(rel_err(sl_physics_stack_eot_m(two, 2), 4.11667e-9) < 1e-5);
    ck_assert(rel_err(sl_physics_stack_capacitance_rel_sigma(two, 2), 0.0316884) < 1e-5);
    /* safe gate: 0.5 * min(20*5e8, 9*7e8) * 1.05556e-9 = 0.5 * 6.3e9 * 1.05556e-9 = 3.325 V */
    ck_assert(rel_err(sl_physics_stack_safe_gate_V(two, 2, 0.5), 3.325) < 1e-4);
    /* 90 nm SiO2 at 10 MV/cm derated by half: 0.5 * 3.9e9 * 90e-9/3.9 = 45 V */
    ck_assert(rel_err(sl_physics_stack_safe_gate_V(&ox, 1, 0.5), 45.0) < 1e-12);
    ck_assert(sl_physics_stack_capacitance_F_per_m2(&ox, 0) == 0.0);
}
END_TEST

/* V_cnp = -e N / C_g: -2e12 cm^-2 on 90 nm SiO2 gives
 * 1.602176634e-19 * 2e16 / 3.83681472e-4 = 8.35160 V; sigma with sigma_N =
 * 0.8e12 cm^-2 and sigma_C/C = 2/90: e sigma_N / C = 1.602176634e-19 * 0.8e16 /
 * 3.83681472e-4 = 3.34065 V; hypot(3.34064, 8.35160 * 0.0222222 = 0.185591) = 3.34579 V. */
START_TEST(test_cnp_and_sigma)
{
    sl_est n = { -2e16, 0.8e16 };
    sl_est v = sl_physics_cnp_V(n, 3.83681472e-4, 2.0 / 90.0);
    ck_assert(rel_err(v.val, 8.35160) < 1e-5);
    ck_assert(rel_err(v.sigma, 3.34579) < 1e-5);
}
END_TEST

/* Charge-balance residual below 1e-12 relative over 0..2000 K, +/-1000 V, and
 * stacks from 2 nm HfO2 to 1 um SiO2 (issue requirement, self-consistency). */
START_TEST(test_charge_balance_residual_sweep)
{
    sl_layer stacks[] = { { 20.0, 2e-9, 0, 5e8 }, { 9.0, 20e-9, 0, 7e8 },
                          { 3.9, 90e-9, 0, 10e8 }, { 3.9, 1e-6, 0, 10e8 } };
    static const double temps[] = { 0.0, 1e-3, 1.5, 4.2, 77.0, 300.0, 1000.0, 2000.0 };
    static const double volts[] = { -1000.0, -137.0, -20.0, -1.0, -1e-3, -1e-6, 0.0,
                                    1e-6, 1e-3, 0.5, 7.0, 80.0, 333.0, 1000.0 };
    double worst = 0.0;
    for (size_t s = 0; s < 4; s++) {
        double cg = sl_physics_stack_capacitance_F_per_m2(&stacks[s], 1);
        for (size_t i = 0; i < 8; i++)
            for (size_t j = 0; j < 14; j++) {
                double mu;
                ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, volts[j], 0.0, cg, temps[i], VF), SL_OK);
                double r = sl_physics_charge_balance_residual(mu, volts[j], 0.0, cg, temps[i], VF);
                ck_assert_msg(isfinite(mu) && r < 1e-12, "stack %zu T=%g V=%g residual %g", s,
                              temps[i], volts[j], r);
                worst = fmax(worst, r);
            }
    }
    ck_assert(worst < 1e-12);
}
END_TEST

START_TEST(test_solver_domain)
{
    double mu = 123.0;
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, 1.0, 0.0, 0.0, 300.0, VF), SL_EINPUT);
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, 1.0, 0.0, 1e-3, -1.0, VF), SL_EINPUT);
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, NAN, 0.0, 1e-3, 300.0, VF), SL_EINPUT);
    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, 5.0, 5.0, 1e-3, 300.0, VF), SL_OK);
    ck_assert(mu == 0.0);
    /* odd symmetry of the balance */
    double up, down;
    sl_physics_solve_fermi_J(&up, 12.0, 2.0, 3.8e-4, 300.0, VF);
    sl_physics_solve_fermi_J(&down, -8.0, 2.0, 3.8e-4, 300.0, VF);
    ck_assert(rel_err(up, -down) < 1e-13);
}
END_TEST

/* The density table against the solver it tabulates: y = x - mu/e within
 * 1e-6 of the offset (of 1 mV below 1 mV: 1 nV there) at every offset from 1 uV to beyond the table's reach (where it solves directly),
 * on 20 nm Al2O3 and 90 nm SiO2 at 4.2, 77 and 300 K; its slope against the
 * gate efficiency (C_g/e) C_q/(C_g + C_q) at the solved Fermi level. The
 * tolerances are this program's accuracy goals, not outside values. */
START_TEST(test_density_table_matches_solver)
{
    sl_layer stacks[] = { { 9.0, 20e-9, 0, 7e8 }, { 3.9, 90e-9, 0, 10e8 } };
    static const double temps[] = { 4.2, 77.0, 300.0 };
    double worst_value = 0.0, worst_slope = 0.0;
    for (size_t s = 0; s < 2; s++) {
        double cg = sl_physics_stack_capacitance_F_per_m2(&stacks[s], 1);
        for (size_t i = 0; i < 3; i++) {
            sl_physics_density_table *t = NULL;
            ck_assert_int_eq(sl_physics_density_table_new(&t, cg, temps[i], VF, 100.0), SL_OK);
            ck_assert(sl_physics_density_table_capacitance_F_per_m2(t) == cg);
            ck_assert(sl_physics_density_table_temperature_K(t) == temps[i]);
            for (double x = 1e-6; x < 300.0; x *= 1.0137) {
                for (int sign = -1; sign <= 1; sign += 2) {
                    double offset = sign * x, mu, slope;
                    ck_assert_int_eq(sl_physics_solve_fermi_J(&mu, offset, 0.0, cg, temps[i], VF), SL_OK);
                    double want = offset - mu / EV;
                    double got = sl_physics_density_table_charge_V(t, offset, &slope);
                    double eff = sl_physics_gate_efficiency_per_m2_V(mu, temps[i], cg, VF) * EV / cg;
                    worst_value = fmax(worst_value, fabs(got - want) / fmax(x, 1e-3));
                    worst_slope = fmax(worst_slope, fabs(slope - eff));
                }
            }
            /* the array form gives the same numbers */
            double vg[3] = { -3.0, 0.25, 7.5 }, y[3], dy[3], one_slope;
            sl_physics_density_table_charge_n(t, y, dy, vg, 0.5, 3);
            for (size_t k = 0; k < 3; k++) {
                ck_assert(y[k] == sl_physics_density_table_charge_V(t, vg[k] - 0.5, &one_slope));
                ck_assert(dy[k] == one_slope);
            }
            /* and beyond the reach (100 V) Newton's solve agrees with the
             * direct one to rounding */
            double far[4] = { -250.0, 0.25, 150.0, 400.0 }, fy[4], fdy[4];
            sl_physics_density_table_charge_n(t, fy, fdy, far, 0.5, 4);
            for (size_t k = 0; k < 4; k++) {
                double want = sl_physics_density_table_charge_V(t, far[k] - 0.5, &one_slope);
                ck_assert_msg(fabs(fy[k] - want) <= 1e-12 * fabs(want), "%g: %.17g vs %.17g",
                              far[k], fy[k], want);
                ck_assert(fabs(fdy[k] - one_slope) <= 1e-12);
            }
            sl_physics_density_table_free(t);
        }
    }
    ck_assert_msg(worst_value < 1e-6, "worst relative error of y %g", worst_value);
    ck_assert_msg(worst_slope < 2e-3, "worst error of dy/dx %g", worst_slope);
}
END_TEST

/* Thin high-k: most of the gate voltage drops on the quantum capacitance
 * near neutrality, so y < x markedly; on thick SiO2 barely. At 300 K and
 * x = 1 V, 20 nm Al2O3 (C_g = 0.398 uF/cm^2, half of C_q(0) = 0.8 uF/cm^2)
 * must lose more than 10 % of the short form, 90 nm SiO2 less than 10 %. */
START_TEST(test_density_table_thin_high_k)
{
    sl_layer alox = { 9.0, 20e-9, 0, 7e8 }, ox = { 3.9, 90e-9, 0, 10e8 };
    sl_physics_density_table *a = NULL, *o = NULL;
    ck_assert_int_eq(sl_physics_density_table_new(&a, sl_physics_stack_capacitance_F_per_m2(&alox, 1),
                                                  300.0, VF, 20.0), SL_OK);
    ck_assert_int_eq(sl_physics_density_table_new(&o, sl_physics_stack_capacitance_F_per_m2(&ox, 1),
                                                  300.0, VF, 20.0), SL_OK);
    ck_assert(sl_physics_density_table_charge_V(a, 1.0, NULL) < 0.9);
    ck_assert(sl_physics_density_table_charge_V(o, 1.0, NULL) > 0.9);
    ck_assert(sl_physics_density_table_charge_V(a, 0.0, NULL) == 0.0);
    ck_assert(isnan(sl_physics_density_table_charge_V(a, NAN, NULL)));
    sl_physics_density_table_free(a);
    sl_physics_density_table_free(o);
    sl_physics_density_table *bad = NULL;
    ck_assert_int_eq(sl_physics_density_table_new(&bad, 0.0, 300.0, VF, 20.0), SL_EINPUT);
    ck_assert_int_eq(sl_physics_density_table_new(&bad, 1e-3, 0.0, VF, 20.0), SL_EINPUT);
    ck_assert_int_eq(sl_physics_density_table_new(&bad, 1e-3, 300.0, VF, -1.0), SL_EINPUT);
    ck_assert_int_eq(sl_physics_density_table_new(&bad, 1e-3, 300.0, VF, INFINITY), SL_EINPUT);
    ck_assert(bad == NULL);
    sl_physics_density_table_free(NULL);
}
END_TEST

/* T_star = (hbar v / k) sqrt(6 n_star / pi): round trip n_th(T_star) = n_star.
 * For n_star = 1.5e11 cm^-2 = 1.5e15 m^-2 by hand: hbar v / k = 1.05457e-34 * 1e6 /
 * 1.380649e-23 = 7.63823e-6 K m; sqrt(6 * 1.5e15 / pi) = 5.35237e7 m^-1; T_star = 408.8 K. */
START_TEST(test_disorder_crossover)
{
    double nstar = 1.5e15;
    double t = sl_physics_disorder_crossover_K(nstar, VF);
    ck_assert(rel_err(sl_physics_thermal_floor_per_m2(t, VF), nstar) < 1e-13);
    ck_assert_msg(fabs(t - 408.8) < 0.5, "T* = %g", t);
    ck_assert(sl_physics_disorder_crossover_K(0.0, VF) == 0.0);
}
END_TEST

/* 1e13 cm^-2 is about 3 carriers per 1000 carbon atoms; atom density
 * 4 / (sqrt(3) a^2) with a = 2.46 angstrom = 3.82e15 cm^-2 (docs/physics.md,
 * common practice figure). */
START_TEST(test_carrier_per_atom_scale)
{
    double a_cm = 2.46e-8;
    double atoms = 4.0 / (sqrt(3.0) * a_cm * a_cm);
    ck_assert(fabs(atoms - 3.82e15) < 0.01e15);
    ck_assert(fabs(1e13 / atoms * 1000.0 - 2.6) < 0.5);
}
END_TEST

START_TEST(test_materials_and_stack_parse)
{
    ck_assert_uint_eq(sl_physics_material_count(), 7);
    ck_assert(sl_physics_material_find("HfO2")->relative_permittivity == 20.0);
    ck_assert_ptr_null(sl_physics_material_find("unobtainium"));
    sl_layer layers[4];
    size_t n;
    sl_diag *d = sl_diag_new();
    ck_assert_int_eq(sl_physics_stack_parse(layers, 4, &n, "HfO2:10:0.5,Al2O3:5", d), SL_OK);
    ck_assert_uint_eq(n, 2);
    ck_assert(rel_err(layers[0].thickness_sigma_m, 0.5e-9) < 1e-14);
    ck_assert_int_eq(sl_physics_stack_parse(layers, 4, &n, "Si02:90", d), SL_EINPUT);
    ck_assert_str_eq(sl_diag_last(d), "unknown material 'Si02' (did you mean 'SiO2'?)");
    ck_assert_int_eq(sl_physics_stack_parse(layers, 4, &n, "SiO2:-3", d), SL_EINPUT);
    ck_assert_int_eq(sl_physics_stack_parse(layers, 4, &n, "SiO2", d), SL_EINPUT);
    ck_assert_int_eq(sl_physics_stack_parse(layers, 4, &n, "SiO2:90,,HfO2:2", d), SL_EINPUT);
    ck_assert_int_eq(sl_physics_stack_parse(layers, 1, &n, "SiO2:90,HfO2:2", d), SL_EINPUT);
    sl_diag_free(d);
}
END_TEST

static Suite *physics_suite(void)
{
    Suite *s = suite_create("physics");
    TCase *tc = tcase_create("core");
    tcase_add_test(tc, test_f1_against_mpmath);
    tcase_add_test(tc, test_total_density_identity);
    tcase_add_test(tc, test_net_density_consistent);
    tcase_add_test(tc, test_thermal_floor_300K);
    tcase_add_test(tc, test_quantum_capacitance_dirac_300K);
    tcase_add_test(tc, test_quantum_capacitance_is_derivative);
    tcase_add_test(tc, test_dos_integrates_to_density);
    tcase_add_test(tc, test_zero_temperature);
    tcase_add_test(tc, test_sio2_300nm_density_per_volt);
    tcase_add_test(tc, test_stack_by_hand);
    tcase_add_test(tc, test_cnp_and_sigma);
    tcase_add_test(tc, test_charge_balance_residual_sweep);
    tcase_add_test(tc, test_solver_domain);
    tcase_add_test(tc, test_disorder_crossover);
    tcase_add_test(tc, test_density_table_matches_solver);
    tcase_add_test(tc, test_density_table_thin_high_k);
    tcase_add_test(tc, test_carrier_per_atom_scale);
    tcase_add_test(tc, test_materials_and_stack_parse);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(physics_suite()); }
