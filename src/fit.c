/* SPDX-License-Identifier: MIT
 * Transfer-curve fitter (see include/splitlot/fit.h). In gate-voltage units
 * the model is R = R_c + K s(V), s = g / h, g = 1 / sqrt(d^2 + (V - V0)^2),
 * d = n0 e / C_g, K = (L/W) / (C_g mu) and h the mobility weight of the
 * two-mobility variant (h = 1 in the symmetric model). R_c and K enter
 * linearly and are projected out of the nonlinear search. With the charge
 * balance as density model, V - V0 is replaced everywhere by the gate
 * offset as charge y(V - V0) = e n_g / C_g from the config's table, and the
 * derivatives by V0 take the factor dy/dx.
 */
#include "splitlot/fit.h"

#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_multilarge_nlinear.h>
#include <gsl/gsl_sort.h>
#include <gsl/gsl_sort_double.h>
#include <gsl/gsl_statistics_double.h>

#define SMOOTH_WINDOW 5        /* moving-median window for the starting peak */
#define MAX_NONLINEAR 3        /* V0, b = ln d, beta = ln(mu_e / mu_h) */
#define MAX_PARAMS 5           /* V0, d, K, R_c, beta (and the full search's) */
/* |Spearman rho| from which a curve peaking at an end counts as monotonic
 * (common practice: a clear trend, not a chance ordering of noise). */
#define MONOTONIC_MIN_RANK_CORRELATION 0.8
/* Spikes: relative residuals beyond this many robust standard deviations
 * (1.4826 MAD), at most SPIKE_MAX_FRACTION of the points (at least one),
 * are left out once when they alone make a fit poor (common practice:
 * instrument glitches such as a compliance hit, far outside Gaussian noise). */
#define SPIKE_MIN_SIGMAS 10.0
#define SPIKE_MAX_FRACTION 0.02
/* Step tolerances of GSL's drivers (relative). The projected search stops
 * at 1e-5: on the 12,500-device benchmark lot its parameters then differ
 * from those at 1e-6 by less than 1e-6 relative, a thousandth of their
 * standard errors, with 7 % fewer iterations. The full search, the
 * fallback, keeps 1e-6. */
#define XTOL_PROJECTED 1e-5
#define XTOL_FULL 1e-6
#define GTOL 1e-12
#define FTOL 0.0

/* Where the shape s is evaluated: V0, b = ln d and beta, with d^2 and the
 * hyperbolic functions of beta/2 computed once. */
typedef struct {
    double v0, b, beta, d2, ch, sh;
} shape_at;

/* Sweep length and parameter count a solver was allocated for. */
typedef struct {
    size_t points, params;
} solver_size;

struct sl_fit_workspace {
    size_t max_points, n;
    double *vg, *r, *u, *g, *s, *smooth, *col, *jac, *rank_work;
    double *ds;                  /* ds/dtheta_j per point, rows of MAX_NONLINEAR */
    double *y, *dy;              /* charge offset y(V - V0) and dy/dx per point,
                                    at the projected shape (density table only) */
    const sl_physics_density_table *density; /* of the sweep being fitted */
    gsl_multilarge_nlinear_workspace *nl;   /* projected search */
    gsl_multifit_nlinear_workspace *nl_full;
    solver_size nl_size, nl_full_size;
    gsl_matrix *cov;
    bool two_mobility;           /* model of the sweep being fitted */
    bool fix_rc_zero;
    bool out_of_memory;          /* the full search's solver could not be made */
    /* Projection state at the last evaluated shape. */
    bool have_state;
    bool state_rc_zero;          /* fix_rc_zero when it was made */
    bool have_gradient;          /* ds, du_a, du_c are for this shape too */
    shape_at at;
    double rc, k, chisq;
    double sc1;                  /* c . 1 */
    double saa, sac, scc, det;   /* Gram matrix of the linear columns */
    double sa1;                  /* a . 1, the sum of the weights u */
    /* a . (u ds/dtheta_j) and c . (u ds/dtheta_j), for the Jacobian */
    double du_a[MAX_NONLINEAR], du_c[MAX_NONLINEAR];
};

static const char *const class_names[SL_FIT_CLASS_COUNT] = {
    "ok", "short", "open", "cnp-outside-sweep", "no-convergence", "poor-fit",
};

const char *sl_fit_class_name(sl_fit_class cls)
{
    return (unsigned)cls < SL_FIT_CLASS_COUNT ? class_names[cls] : "?";
}

sl_status sl_fit_class_parse(sl_fit_class *out, const char *name)
{
    for (int i = 0; i < SL_FIT_CLASS_COUNT; i++) {
        if (strcmp(name, class_names[i]) == 0) {
            *out = (sl_fit_class)i;
            return SL_OK;
        }
    }
    return SL_EINPUT;
}

void sl_fit_config_default(sl_fit_config *cfg, double gate_capacitance_F_per_m2,
                           double channel_length_um, double channel_width_um)
{
    cfg->gate_capacitance_F_per_m2 = gate_capacitance_F_per_m2;
    cfg->length_over_width = channel_length_um / channel_width_um;
    cfg->short_max_ohm = 50.0;        /* common practice */
    cfg->short_flat_max_ohm = 500.0;  /* common practice */
    cfg->open_min_ohm = 1e9;          /* common practice: source-meter overload */
    cfg->min_modulation = 0.05;       /* common practice */
    cfg->poor_max_rel_rms = 0.05;     /* common practice */
    cfg->poor_min_r_squared = 0.9;    /* common practice */
    cfg->max_iterations = 100;
    cfg->method = SL_FIT_METHOD_PROJECTED;
    cfg->model = SL_FIT_MODEL_SYMMETRIC;
    cfg->density_table = NULL;
}

const char *sl_fit_density_model_name(const sl_fit_config *cfg)
{
    return cfg->density_table ? "qc" : "short";
}

/* Gate offset as charge, e n_g / C_g in V, at x = V - V0, and dy/dx. */
static inline double charge_offset_V(const sl_physics_density_table *density, double x,
                                     double *slope)
{
    if (!density) {
        *slope = 1.0;
        return x;
    }
    return sl_physics_density_table_charge_V(density, x, slope);
}

static double model_at_density_ohm(const sl_fit_params *p, double electron_hole_mobility_ratio,
                                   const sl_fit_config *cfg, double ng_per_m2)
{
    double n0_per_m2 = p->n0_per_cm2 * SL_PER_M2_PER_PER_CM2;
    double mobility_m2_per_Vs = p->mobility_cm2_per_Vs * SL_M2_PER_CM2;
    double density = hypot(n0_per_m2, ng_per_m2);
    double electron_share = density > 0.0 ? ng_per_m2 / density : 0.0;
    double half_log_ratio = 0.5 * log(electron_hole_mobility_ratio);
    double weight = cosh(half_log_ratio) + electron_share * sinh(half_log_ratio);
    return p->r_contact_ohm + cfg->length_over_width / (SL_SI_ELEMENTARY_CHARGE * mobility_m2_per_Vs *
                                                        density * weight);
}

double sl_fit_model_two_mobility_ohm(const sl_fit_params *p, double electron_hole_mobility_ratio,
                                     const sl_fit_config *cfg, double vg_V)
{
    double slope;
    double y = charge_offset_V(cfg->density_table, vg_V - p->cnp_V, &slope);
    double ng_per_m2 = cfg->gate_capacitance_F_per_m2 * y / SL_SI_ELEMENTARY_CHARGE;
    return model_at_density_ohm(p, electron_hole_mobility_ratio, cfg, ng_per_m2);
}

double sl_fit_model_ohm(const sl_fit_params *p, const sl_fit_config *cfg, double vg_V)
{
    return sl_fit_model_two_mobility_ohm(p, 1.0, cfg, vg_V);
}

double sl_fit_model_at_density_ohm(const sl_fit_params *p, const sl_fit_config *cfg,
                                   double net_density_per_m2)
{
    return model_at_density_ohm(p, 1.0, cfg, net_density_per_m2);
}

/* ---- workspace ---- */

sl_fit_workspace *sl_fit_workspace_new(size_t max_points)
{
    if (max_points < SL_FIT_MIN_POINTS)
        return NULL;
    sl_fit_workspace *ws = calloc(1, sizeof *ws);
    if (!ws)
        return NULL;
    ws->max_points = max_points;
    double **arrays[] = { &ws->vg, &ws->r, &ws->u, &ws->g, &ws->s, &ws->smooth, &ws->col,
                          &ws->y, &ws->dy };
    bool ok = true;
    for (size_t i = 0; i < sizeof arrays / sizeof arrays[0]; i++)
        ok = ok && (*arrays[i] = malloc(max_points * sizeof(double))) != NULL;
    ws->jac = ok ? malloc(max_points * MAX_PARAMS * sizeof(double)) : NULL;
    ws->ds = ok ? malloc(max_points * MAX_NONLINEAR * sizeof(double)) : NULL;
    ws->rank_work = ok ? malloc(2 * max_points * sizeof(double)) : NULL;
    ws->cov = gsl_matrix_alloc(MAX_PARAMS, MAX_PARAMS);
    if (!ok || !ws->jac || !ws->ds || !ws->rank_work || !ws->cov) {
        sl_fit_workspace_free(ws);
        return NULL;
    }
    return ws;
}

void sl_fit_workspace_free(sl_fit_workspace *ws)
{
    if (!ws)
        return;
    free(ws->vg);
    free(ws->r);
    free(ws->u);
    free(ws->g);
    free(ws->s);
    free(ws->smooth);
    free(ws->col);
    free(ws->y);
    free(ws->dy);
    free(ws->jac);
    free(ws->ds);
    free(ws->rank_work);
    if (ws->nl)
        gsl_multilarge_nlinear_free(ws->nl);
    if (ws->nl_full)
        gsl_multifit_nlinear_free(ws->nl_full);
    if (ws->cov)
        gsl_matrix_free(ws->cov);
    free(ws);
}

static size_t nonlinear_count(const sl_fit_workspace *ws) { return ws->two_mobility ? 3 : 2; }
static size_t param_count(const sl_fit_workspace *ws) { return ws->two_mobility ? 5 : 4; }

/* A GSL solver is sized for one sweep length and parameter count; keep it
 * while they repeat: true when the solver that exists has the size asked
 * for, else *have takes that size for a new one. */
static bool solver_fits(bool exists, solver_size *have, size_t n, size_t p)
{
    if (exists && have->points == n && have->params == p)
        return true;
    *have = (solver_size){ n, p };
    return false;
}

/* Levenberg-Marquardt: a step is a small p x p solve (normal equations by
 * Cholesky, fine at p <= 5 with parameters of order one), and its damping
 * copes with the flat direction of d when the peak is sharp. The projected
 * search runs on the driver for large problems, which asks the model for
 * J^T f and J^T J instead of the n x p Jacobian: with two or three
 * parameters, handing the driver J costs more (copies and matrix-vector
 * products over all points) than the model itself.
 * That driver's Levenberg-Marquardt method needs the residual vector f
 * only through its norm (the ratio of actual to predicted reduction, the
 * latter from J^T J, and the convergence tests) and as the vector J^T
 * multiplies, which the model forms from its own residuals. So the driver
 * is given a residual of p entries, (|f|, 0, ...), whatever the sweep's
 * length: its norms, copies and checks over all points go, and one solver
 * serves sweeps of any length. */
static bool ensure_projected_solver(sl_fit_workspace *ws)
{
    size_t p = nonlinear_count(ws);
    if (solver_fits(ws->nl != NULL, &ws->nl_size, p, p))
        return true;
    if (ws->nl)
        gsl_multilarge_nlinear_free(ws->nl);
    gsl_multilarge_nlinear_parameters par = gsl_multilarge_nlinear_default_parameters();
    par.trs = gsl_multilarge_nlinear_trs_lm;
    par.solver = gsl_multilarge_nlinear_solver_cholesky;
    par.scale = gsl_multilarge_nlinear_scale_levenberg;
    ws->nl = gsl_multilarge_nlinear_alloc(gsl_multilarge_nlinear_trust, &par, p, p);
    return ws->nl != NULL;
}

/* The full search, the same method on the driver that takes J itself. */
static bool ensure_full_solver(sl_fit_workspace *ws, size_t n)
{
    if (solver_fits(ws->nl_full != NULL, &ws->nl_full_size, n, param_count(ws)))
        return true;
    if (ws->nl_full)
        gsl_multifit_nlinear_free(ws->nl_full);
    gsl_multifit_nlinear_parameters par = gsl_multifit_nlinear_default_parameters();
    par.trs = gsl_multifit_nlinear_trs_lm;
    par.solver = gsl_multifit_nlinear_solver_cholesky;
    par.scale = gsl_multifit_nlinear_scale_levenberg;
    ws->nl_full = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &par, n,
                                             param_count(ws));
    return ws->nl_full != NULL;
}

/* ---- the shape s = g / h and its derivatives ---- */

static shape_at shape_setup(double v0, double b, double beta)
{
    shape_at a = { v0, b, beta, exp(2.0 * b), cosh(0.5 * beta), sinh(0.5 * beta) };
    return a;
}

/* h = cosh(beta/2) + t sinh(beta/2), t = x g the electrons' share of n - p
 * over n + p: the density-weighted mobility over the geometric mean one. */
static inline double shape_from_g(const shape_at *a, double x, double g, bool two_mobility)
{
    return two_mobility ? g / (a->ch + x * g * a->sh) : g;
}

static inline double shape_value(const sl_fit_workspace *ws, const shape_at *a, double vg)
{
    double slope, y = charge_offset_V(ws->density, vg - a->v0, &slope);
    return shape_from_g(a, y, 1.0 / sqrt(a->d2 + y * y), ws->two_mobility);
}

typedef struct {
    double s, ds[MAX_NONLINEAR];   /* by V0, b, beta */
} shape_grad;

/* Gradient at offset x = V - V0 where g = 1 / sqrt(d^2 + x^2) is known. */
static inline shape_grad shape_gradient_at(const shape_at *a, double x, double g,
                                           bool two_mobility)
{
    double g2 = g * g;
    shape_grad r;
    if (!two_mobility) {   /* h = 1: the common case, kept cheap */
        r.s = g;
        r.ds[0] = x * g2 * g;
        r.ds[1] = -a->d2 * g2 * g;
        r.ds[2] = 0.0;
        return r;
    }
    double h = a->ch + x * g * a->sh, inv_h2 = 1.0 / (h * h);
    r.s = g / h;
    r.ds[0] = (x * a->ch * g2 * g + a->sh * g2) * inv_h2;
    r.ds[1] = -a->d2 * g2 * g * a->ch * inv_h2;
    r.ds[2] = -0.5 * g * (a->sh + x * g * a->ch) * inv_h2;
    return r;
}

/* At a gate voltage, through the density model: the offset as charge y
 * takes the place of x, and d/dV0 takes the factor dy/dx. */
static inline shape_grad shape_gradient(const sl_fit_workspace *ws, const shape_at *a, double vg)
{
    double slope, y = charge_offset_V(ws->density, vg - a->v0, &slope);
    shape_grad r = shape_gradient_at(a, y, 1.0 / sqrt(a->d2 + y * y), ws->two_mobility);
    r.ds[0] *= slope;
    return r;
}

static shape_at shape_of_vector(const sl_fit_workspace *ws, const gsl_vector *x)
{
    double beta = ws->two_mobility ? gsl_vector_get(x, 2) : 0.0;
    return shape_setup(gsl_vector_get(x, 0), gsl_vector_get(x, 1), beta);
}

/* ---- variable projection ---- */

/* With u = 1/R the relative residual is f = 1 - R_c u - K s u: a linear least
 * squares problem in (R_c, K) with columns a = u, c = s u and target 1. The
 * 2x2 Gram matrix is formed once per shape and serves the solve for (R_c, K)
 * and every Kaufman projection, which is why it is not left to
 * gsl_fit_wlinear (two passes and a division per point, for each of them). */
static void gram_solve(const sl_fit_workspace *ws, double rhs_a, double rhs_c, double *x_a,
                       double *x_c)
{
    if (ws->fix_rc_zero) {
        *x_a = 0.0;
        *x_c = rhs_c / ws->scc;
        return;
    }
    *x_a = (ws->scc * rhs_a - ws->sac * rhs_c) / ws->det;
    *x_c = (ws->saa * rhs_c - ws->sac * rhs_a) / ws->det;
}

static bool same_shape(const shape_at *a, const shape_at *b)
{
    return a->v0 == b->v0 && a->b == b->b && a->beta == b->beta;
}

/* Sums over the points of a . (u ds/dtheta_j) and c . (u ds/dtheta_j). */
typedef struct {
    double du_a[MAX_NONLINEAR], du_c[MAX_NONLINEAR];
} gradient_sums;

/* Keeps ds/dtheta_j of point i in ws->ds and adds u ds/dtheta_j to the
 * sums. */
static inline void add_gradient(sl_fit_workspace *ws, gradient_sums *sums, size_t i, double u,
                                double c, const shape_grad *sg, bool two_mobility)
{
    double *ds = ws->ds + i * MAX_NONLINEAR;
    for (size_t j = 0; j < (two_mobility ? 3u : 2u); j++) {
        double du = u * sg->ds[j];
        ds[j] = sg->ds[j];
        sums->du_a[j] += u * du;
        sums->du_c[j] += c * du;
    }
}

static void keep_gradient(sl_fit_workspace *ws, const gradient_sums *sums)
{
    memcpy(ws->du_a, sums->du_a, sizeof ws->du_a);
    memcpy(ws->du_c, sums->du_c, sizeof ws->du_c);
}

/* The offset as charge y, its slope and g = 1 / sqrt(d^2 + y^2) of every
 * point at the shape *at, through the density table. */
static void charge_pass(sl_fit_workspace *ws, const shape_at *at, bool with_gradient)
{
    sl_physics_density_table_charge_n(ws->density, ws->y, with_gradient ? ws->dy : NULL,
                                      ws->vg, at->v0, ws->n);
    const double d2 = at->d2, *restrict y = ws->y;
    double *restrict gv = ws->g;
    for (size_t i = 0; i < ws->n; i++) /* vectorised, as the short form's */
        gv[i] = 1.0 / sqrt(d2 + y[i] * y[i]);
}

/* One pass over the points at the shape *at: g and s of every point, the
 * Gram matrix and its right-hand side, and with_gradient also the sums
 * du_a, du_c and the values ws->ds that Kaufman's Jacobian needs (a fused
 * accumulation in our own model evaluation). Written for constant flags
 * (see project). */
static inline void projection_pass(sl_fit_workspace *ws, const shape_at *at, bool two_mobility,
                                   bool with_gradient)
{
    double sac = 0.0, scc = 0.0, sc1 = 0.0;
    gradient_sums sums = { { 0 }, { 0 } };
    const double v0 = at->v0, d2 = at->d2;
    const double *restrict vg = ws->vg;
    double *restrict gv = ws->g;
    const bool table = ws->density != NULL;
    if (table)
        charge_pass(ws, at, with_gradient);
    else
        for (size_t i = 0; i < ws->n; i++) { /* no sums: a loop the compiler vectorises */
            double x = vg[i] - v0;
            gv[i] = 1.0 / sqrt(d2 + x * x);
        }
    for (size_t i = 0; i < ws->n; i++) {
        double x = table ? ws->y[i] : ws->vg[i] - at->v0, g = ws->g[i], u = ws->u[i];
        shape_grad sg = { shape_from_g(at, x, g, two_mobility), { 0 } };
        if (with_gradient)
            sg = shape_gradient_at(at, x, g, two_mobility);
        if (with_gradient && table)
            sg.ds[0] *= ws->dy[i];
        double c = sg.s * u;
        ws->s[i] = sg.s;
        sac += u * c;
        scc += c * c;
        sc1 += c;
        if (with_gradient)
            add_gradient(ws, &sums, i, u, c, &sg, two_mobility);
    }
    ws->sac = sac;
    ws->scc = scc;
    ws->sc1 = sc1;
    ws->det = ws->saa * scc - sac * sac;
    gram_solve(ws, ws->sa1, sc1, &ws->rc, &ws->k);
    keep_gradient(ws, &sums);
}

/* The gradient sums alone, from g and s kept by a projection at this shape
 * (the same numbers projection_pass would add up); the slopes dy/dx of the
 * density table are taken now, as that projection did not need them. */
static inline void gradient_pass(sl_fit_workspace *ws, bool two_mobility)
{
    gradient_sums sums = { { 0 }, { 0 } };
    const bool table = ws->density != NULL;
    if (table)
        sl_physics_density_table_charge_n(ws->density, ws->y, ws->dy, ws->vg, ws->at.v0, ws->n);
    for (size_t i = 0; i < ws->n; i++) {
        double u = ws->u[i], c = ws->s[i] * u;
        double x = table ? ws->y[i] : ws->vg[i] - ws->at.v0;
        shape_grad sg = shape_gradient_at(&ws->at, x, ws->g[i], two_mobility);
        if (table)
            sg.ds[0] *= ws->dy[i];
        add_gradient(ws, &sums, i, u, c, &sg, two_mobility);
    }
    keep_gradient(ws, &sums);
}

/* Solves for (R_c, K) at the shape *at and keeps what the residuals and
 * (with_gradient) the Jacobian there need. What the last call left for the
 * same shape is reused. The cost is left to projected_chisq. */
static void project(sl_fit_workspace *ws, const shape_at *at, bool with_gradient)
{
    bool same = ws->have_state && same_shape(&ws->at, at) && ws->state_rc_zero == ws->fix_rc_zero;
    if (same && (ws->have_gradient || !with_gradient))
        return;
    if (same && ws->two_mobility)
        gradient_pass(ws, true);
    else if (same)
        gradient_pass(ws, false);
    else if (ws->two_mobility && with_gradient)
        projection_pass(ws, at, true, true);
    else if (ws->two_mobility)
        projection_pass(ws, at, true, false);
    else if (with_gradient)
        projection_pass(ws, at, false, true);
    else
        projection_pass(ws, at, false, false);
    ws->at = *at;
    ws->have_state = true;
    ws->state_rc_zero = ws->fix_rc_zero;
    ws->have_gradient = with_gradient;
}

static inline double projected_residual_at(const sl_fit_workspace *ws, size_t i)
{
    return 1.0 - (ws->rc + ws->k * ws->s[i]) * ws->u[i];
}

/* Sum of squared relative residuals at the last projection. */
static double projected_chisq(const sl_fit_workspace *ws)
{
    double chisq = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double f = projected_residual_at(ws, i);
        chisq += f * f;
    }
    return chisq;
}

/* The same from the sums of the projection alone: at the least-squares
 * (R_c, K) the residual is orthogonal to a and c, so chi^2 = f . 1 =
 * n - R_c (a . 1) - K (c . 1). Exact but for rounding of relative size
 * n eps / chi^2, which is ample for ranking starting values. */
static double projected_chisq_from_sums(const sl_fit_workspace *ws)
{
    return (double)ws->n - ws->rc * ws->sa1 - ws->k * ws->sc1;
}

/* The residual of the projected search as the driver sees it, (|f|, 0,
 * ...) (see ensure_projected_solver). The Jacobian sums are gathered in the
 * same pass: the driver asks for the Jacobian at every point whose step it
 * accepts, which is nearly every point it evaluates. */
static int projected_residual(const gsl_vector *x, void *data, gsl_vector *f)
{
    sl_fit_workspace *ws = data;
    shape_at at = shape_of_vector(ws, x);
    project(ws, &at, true);
    gsl_vector_set_zero(f);
    f->data[0] = sqrt(projected_chisq(ws));
    return GSL_SUCCESS;
}

/* Kaufman's approximation of the projected Jacobian: column j is
 * -P_perp t_j with t_j = u K ds/dtheta_j and P_perp the projector off
 * span{a, c}, i.e. J_ij = alpha_j a_i + beta_j c_i - t_ij where (alpha_j,
 * beta_j) solve the Gram system for t_j (right-hand side K du_a, K du_c).
 * GSL's large-problem driver asks for products with J only, never for J:
 * see projected_jacobian. */
typedef struct {
    double alpha[MAX_NONLINEAR], beta[MAX_NONLINEAR];
} kaufman_coefficients;

static kaufman_coefficients kaufman_at_state(const sl_fit_workspace *ws)
{
    kaufman_coefficients kc = { { 0 }, { 0 } };
    for (size_t j = 0; j < nonlinear_count(ws); j++)
        gram_solve(ws, ws->k * ws->du_a[j], ws->k * ws->du_c[j], &kc.alpha[j], &kc.beta[j]);
    return kc;
}

/* Row i of J (the third entry 0 in the symmetric model), from the values
 * the projection kept. Written for a constant two_mobility. */
static inline void kaufman_row(const sl_fit_workspace *ws, const kaufman_coefficients *kc,
                               size_t i, bool two_mobility, double row[MAX_NONLINEAR])
{
    const double *ds = ws->ds + i * MAX_NONLINEAR;
    double u = ws->u[i], ku = ws->k * u, su = ws->s[i] * u;
    row[2] = 0.0;
    for (size_t j = 0; j < (two_mobility ? 3u : 2u); j++)
        row[j] = kc->alpha[j] * u + kc->beta[j] * su - ku * ds[j];
}

/* v = J^T f, f the residuals at the last projection, and J^T J (either may
 * be NULL), the rows of J formed one at a time and accumulated in the same
 * pass (a fused accumulation in our own model evaluation). Written for a
 * constant two_mobility. */
static inline void jacobian_transpose_products(const sl_fit_workspace *ws, bool two_mobility,
                                               gsl_vector *v, gsl_matrix *jtj)
{
    kaufman_coefficients kc = kaufman_at_state(ws);
    double w0 = 0.0, w1 = 0.0, w2 = 0.0;
    double s00 = 0.0, s10 = 0.0, s11 = 0.0, s20 = 0.0, s21 = 0.0, s22 = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double r[MAX_NONLINEAR], wi = v ? projected_residual_at(ws, i) : 0.0;
        kaufman_row(ws, &kc, i, two_mobility, r);
        w0 += wi * r[0];
        w1 += wi * r[1];
        s00 += r[0] * r[0];
        s10 += r[1] * r[0];
        s11 += r[1] * r[1];
        if (two_mobility) {
            w2 += wi * r[2];
            s20 += r[2] * r[0];
            s21 += r[2] * r[1];
            s22 += r[2] * r[2];
        }
    }
    const double jw[MAX_NONLINEAR] = { w0, w1, w2 };
    const double sums[MAX_NONLINEAR][MAX_NONLINEAR] = {
        { s00, s10, s20 }, { s10, s11, s21 }, { s20, s21, s22 },
    };
    for (size_t j = 0; j < nonlinear_count(ws); j++) {
        if (v)
            v->data[j * v->stride] = jw[j];
        for (size_t k = 0; jtj && k < nonlinear_count(ws); k++)
            jtj->data[j * jtj->tda + k] = sums[j][k];
    }
}

/* df of the projected search, GSL's large-problem contract: v = J^T w for
 * CblasTrans and J^T J (full, symmetric) into jtj; v or jtj may be NULL. The
 * driver's w is the residual it was given at x, so J^T f is formed from the
 * model's own residuals there (see ensure_projected_solver). The products
 * J w of CblasNoTrans, which the Levenberg-Marquardt method never asks for,
 * are refused. */
static int projected_jacobian(CBLAS_TRANSPOSE_t trans, const gsl_vector *x, const gsl_vector *w,
                              void *data, gsl_vector *v, gsl_matrix *jtj)
{
    sl_fit_workspace *ws = data;
    (void)w;
    if (v && trans == CblasNoTrans)
        return GSL_EINVAL;
    shape_at at = shape_of_vector(ws, x);
    project(ws, &at, true);
    if (ws->two_mobility)
        jacobian_transpose_products(ws, true, v, jtj);
    else
        jacobian_transpose_products(ws, false, v, jtj);
    return GSL_SUCCESS;
}

/* Run GSL's multifit trust-region driver from start; the solution is left
 * in start. No progress means no step can lower the cost any more: a
 * minimum. */
static int run_driver(gsl_multifit_nlinear_workspace *nl, gsl_multifit_nlinear_fdf *fdf,
                      double *start, const sl_fit_config *cfg, int *iterations)
{
    gsl_vector_view x0 = gsl_vector_view_array(start, fdf->p);
    int info = 0, st = gsl_multifit_nlinear_init(&x0.vector, fdf, nl);
    if (st == GSL_SUCCESS)
        st = gsl_multifit_nlinear_driver((size_t)cfg->max_iterations, XTOL_FULL, GTOL, FTOL, NULL,
                                         NULL, &info, nl);
    *iterations += (int)gsl_multifit_nlinear_niter(nl);
    gsl_vector_memcpy(&x0.vector, gsl_multifit_nlinear_position(nl));
    return st == GSL_ENOPROG ? GSL_SUCCESS : st;
}

/* The same for the large-problem driver of the projected search. */
static int run_large_driver(gsl_multilarge_nlinear_workspace *nl,
                            gsl_multilarge_nlinear_fdf *fdf, double *start,
                            const sl_fit_config *cfg, int *iterations)
{
    gsl_vector_view x0 = gsl_vector_view_array(start, fdf->p);
    int info = 0, st = gsl_multilarge_nlinear_init(&x0.vector, fdf, nl);
    if (st == GSL_SUCCESS)
        st = gsl_multilarge_nlinear_driver((size_t)cfg->max_iterations, XTOL_PROJECTED, GTOL,
                                           FTOL, NULL, NULL, &info, nl);
    *iterations += (int)gsl_multilarge_nlinear_niter(nl);
    gsl_vector_memcpy(&x0.vector, gsl_multilarge_nlinear_position(nl));
    return st == GSL_ENOPROG ? GSL_SUCCESS : st;
}

/* Projected search from *at; leaves the solution in *at and the projection
 * state. */
static int run_search(sl_fit_workspace *ws, const sl_fit_config *cfg, shape_at *at,
                      int *iterations)
{
    gsl_multilarge_nlinear_fdf fdf = {
        .f = projected_residual, .df = projected_jacobian, .fvv = NULL,
        .n = nonlinear_count(ws), .p = nonlinear_count(ws), .params = ws,
    };
    double x[MAX_NONLINEAR] = { at->v0, at->b, at->beta };
    int st = run_large_driver(ws->nl, &fdf, x, cfg, iterations);
    *at = shape_setup(x[0], x[1], ws->two_mobility ? x[2] : 0.0);
    project(ws, at, false);   /* usually the driver's last evaluation, kept */
    ws->chisq = projected_chisq(ws);
    return st;
}

/* ---- full search over all parameters ---- */

/* x = (V0, b, c, rho[, beta]) with d = e^b, K = e^c and R_c = rho^2, so that
 * K > 0 and R_c >= 0 hold without bounds. */
typedef struct {
    shape_at at;
    double k, rho;
} full_point;

static full_point unpack_full(const sl_fit_workspace *ws, const gsl_vector *x)
{
    double beta = ws->two_mobility ? gsl_vector_get(x, 4) : 0.0;
    full_point p = { shape_setup(gsl_vector_get(x, 0), gsl_vector_get(x, 1), beta),
                     exp(gsl_vector_get(x, 2)), gsl_vector_get(x, 3) };
    return p;
}

/* Fills ws->s on the way. */
static int full_residual(const gsl_vector *x, void *data, gsl_vector *f)
{
    sl_fit_workspace *ws = data;
    full_point p = unpack_full(ws, x);
    for (size_t i = 0; i < ws->n; i++) {
        double s = shape_value(ws, &p.at, ws->vg[i]);
        ws->s[i] = s;
        f->data[i * f->stride] = 1.0 - (p.rho * p.rho + p.k * s) * ws->u[i];
    }
    return GSL_SUCCESS;
}

static int full_jacobian(const gsl_vector *x, void *data, gsl_matrix *jac)
{
    sl_fit_workspace *ws = data;
    full_point p = unpack_full(ws, x);
    for (size_t i = 0; i < ws->n; i++) {
        shape_grad sg = shape_gradient(ws, &p.at, ws->vg[i]);
        double u = ws->u[i], ku = p.k * u;
        double *row = jac->data + i * jac->tda;
        row[0] = -ku * sg.ds[0];
        row[1] = -ku * sg.ds[1];
        row[2] = -ku * sg.s;
        row[3] = -2.0 * p.rho * u;
        if (ws->two_mobility)
            row[4] = -ku * sg.ds[2];
    }
    return GSL_SUCCESS;
}

/* Full search from *at with the linear solution there as the start (K > 0
 * and R_c > 0 forced, as logarithm and square root need them). */
static int run_full_search(sl_fit_workspace *ws, const sl_fit_config *cfg, shape_at *at,
                           int *iterations)
{
    ws->fix_rc_zero = false;
    ws->have_state = false;
    project(ws, at, false);
    double r_min = gsl_stats_min(ws->r, 1, ws->n);
    double k0 = ws->k > 0.0 ? ws->k : (gsl_stats_max(ws->r, 1, ws->n) - r_min) * exp(at->b);
    double rc0 = GSL_MAX(ws->rc, 0.01 * r_min);
    double x[MAX_PARAMS] = { at->v0, at->b, log(k0), sqrt(rc0), at->beta };
    gsl_multifit_nlinear_fdf fdf = {
        .f = full_residual, .df = full_jacobian, .fvv = NULL,
        .n = ws->n, .p = param_count(ws), .params = ws,
    };
    int st = run_driver(ws->nl_full, &fdf, x, cfg, iterations);
    gsl_vector_view xv = gsl_vector_view_array(x, fdf.p);
    full_point p = unpack_full(ws, &xv.vector);
    *at = p.at;
    ws->k = p.k;
    ws->rc = p.rho * p.rho;
    gsl_vector *f = gsl_multifit_nlinear_residual(ws->nl_full);
    full_residual(&xv.vector, ws, f);   /* ws->s at the solution */
    gsl_blas_ddot(f, f, &ws->chisq);
    ws->have_state = false;
    return st;
}

/* ---- starting values ---- */

/* Half width of the peak of curve (smoothed or raw readings) at half height
 * over its smallest value, from the side where it is reached nearest; the
 * sweep span when neither. */
static double peak_half_width_V(const sl_fit_workspace *ws, const double *curve, double floor_ohm,
                                size_t peak)
{
    double half = floor_ohm + 0.5 * (curve[peak] - floor_ohm);
    double best = ws->vg[ws->n - 1] - ws->vg[0];
    size_t i = peak;
    while (i > 0 && curve[i - 1] > half)
        i--;
    if (i > 0)
        best = fmin(best, ws->vg[peak] - ws->vg[i - 1]);
    for (i = peak; i + 1 < ws->n && curve[i + 1] > half;)
        i++;
    if (i + 1 < ws->n)
        best = fmin(best, ws->vg[i + 1] - ws->vg[peak]);
    return best;
}

/* The gate voltage of the vertex of the parabola through the curve at the
 * peak and its two neighbours (Lagrange's three-point form), kept between
 * the neighbours: the peak placed between the grid's points. */
static double peak_vertex_V(const sl_fit_workspace *ws, const double *curve, size_t peak)
{
    const double x0 = ws->vg[peak - 1], x1 = ws->vg[peak], x2 = ws->vg[peak + 1];
    const double y0 = curve[peak - 1], y1 = curve[peak], y2 = curve[peak + 1];
    double a = (x1 - x0) * (y1 - y2), b = (x1 - x2) * (y1 - y0);
    double den = a - b;
    if (!(den != 0.0))
        return x1;
    double v = x1 - 0.5 * ((x1 - x0) * a - (x1 - x2) * b) / den;
    return v > x0 && v < x2 ? v : x1;
}

/* ln d to start from at the peak: half height is reached at |V - V0| =
 * sqrt(3) d; that guess and its half and double are ranked by projected
 * cost at V0 = v0, and where the guess costs least the vertex of the
 * parabola through the three costs (evenly spaced in ln d) is taken; the
 * least cost goes to *cost. The candidates are ranked with the short form
 * of the density, whose shape pass is the cheap one; the winner is then
 * turned into charge, y(d), the unit of the density table's d. */
static double start_log_width(sl_fit_workspace *ws, const double *curve, double floor_ohm,
                              size_t peak, double v0, double *cost)
{
    double span = ws->vg[ws->n - 1] - ws->vg[0];
    double d = peak_half_width_V(ws, curve, floor_ohm, peak) / M_SQRT3;
    d = GSL_MIN(GSL_MAX(d, 1e-4 * span), span);
    const sl_physics_density_table *density = ws->density;
    ws->density = NULL;
    ws->have_state = false;
    static const double factors[] = { 0.5, 2.0, 1.0 };
    double costs[3], log_best = log(d);
    *cost = HUGE_VAL;
    for (size_t i = 0; i < sizeof factors / sizeof factors[0]; i++) {
        shape_at at = shape_setup(v0, log(d * factors[i]), 0.0);
        project(ws, &at, false);
        double chisq = projected_chisq_from_sums(ws);
        costs[i] = ws->k > 0.0 ? chisq : HUGE_VAL;
        if (costs[i] < *cost) {
            *cost = costs[i];
            log_best = at.b;
        }
    }
    double curvature = costs[0] - 2.0 * costs[2] + costs[1];
    if (*cost == costs[2] && isfinite(costs[0]) && isfinite(costs[1]) && curvature > 0.0)
        log_best += 0.5 * M_LN2 * (costs[0] - costs[1]) / curvature;
    double best = exp(log_best);
    if (density) {
        double slope;
        ws->density = density;
        /* half height at y = sqrt(3) d in charge, where the gate is at
         * sqrt(3) times the short form's d */
        best = fabs(charge_offset_V(density, M_SQRT3 * best, &slope)) / M_SQRT3;
    }
    ws->have_state = false;   /* the projection kept was at another shape */
    return log(best);
}

static bool interior(size_t index, size_t n)
{
    size_t edge = SMOOTH_WINDOW / 2;
    return index >= edge && index + edge < n;
}

/* Extremes of the readings and of their moving median (one pass each). */
typedef struct {
    double r_min, r_max, s_min, s_max;
    size_t r_peak, s_peak;   /* first index of the maximum */
} sweep_extremes;

static sweep_extremes find_extremes(const sl_fit_workspace *ws)
{
    sweep_extremes e;
    size_t r_low, s_low;
    gsl_stats_minmax_index(&r_low, &e.r_peak, ws->r, 1, ws->n);
    gsl_stats_minmax_index(&s_low, &e.s_peak, ws->smooth, 1, ws->n);
    e.r_min = ws->r[r_low];
    e.r_max = ws->r[e.r_peak];
    e.s_min = ws->smooth[s_low];
    e.s_max = ws->smooth[e.s_peak];
    return e;
}

/* Start at the peak of the moving median (robust to spikes) or of the raw
 * readings (a peak only a point or two wide on a coarse sweep, which the
 * median removes), whichever has the lower projected cost. */
static void choose_start(sl_fit_workspace *ws, const sweep_extremes *e, shape_at *start)
{
    const double *curves[2] = { ws->r, ws->smooth };
    const double floors[2] = { e->r_min, e->s_min };
    const size_t peaks[2] = { e->r_peak, e->s_peak };
    /* Peaks a window apart or less are one peak: the raw one will do. */
    size_t candidates = peaks[0] + SMOOTH_WINDOW / 2 >= peaks[1] &&
                        peaks[1] + SMOOTH_WINDOW / 2 >= peaks[0] ? 1 : 2;
    double best_cost = HUGE_VAL;
    for (size_t c = 0; c < candidates; c++) {
        size_t peak = peaks[c];
        if (!interior(peak, ws->n))
            continue;
        double v0 = peak_vertex_V(ws, curves[c], peak), cost;
        double width = start_log_width(ws, curves[c], floors[c], peak, v0, &cost);
        if (cost < best_cost || best_cost == HUGE_VAL) {
            best_cost = cost;
            *start = shape_setup(v0, width, 0.0);
        }
    }
}

/* ---- classification before fitting ---- */

static bool any_open(const double *r_ohm, size_t n, double open_min_ohm)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(r_ohm[i]) || r_ohm[i] >= open_min_ohm)
            return true;
    return false;
}

/* The values of a full window in order, slid on by one point: the value
 * that leaves is taken out and the one that enters moved into its place in
 * the order (one step of an insertion sort), so the window is never sorted
 * again. The readings are finite here (any_open turned the others away). */
static void slide_window(double sorted[SMOOTH_WINDOW], double leaving, double entering)
{
    size_t k = 0;
    while (k + 1 < SMOOTH_WINDOW && sorted[k] != leaving)
        k++;
    for (; k > 0 && sorted[k - 1] > entering; k--)
        sorted[k] = sorted[k - 1];
    for (; k + 1 < SMOOTH_WINDOW && sorted[k + 1] < entering; k++)
        sorted[k] = sorted[k + 1];
    sorted[k] = entering;
}

/* Moving median of the readings over SMOOTH_WINDOW points, the window
 * truncated at the ends: the values gsl_movstat_median gives with
 * GSL_MOVSTAT_END_TRUNCATE, at a fraction of the cost of its general
 * accumulator. The first full window is sorted by gsl_sort and then slid
 * along (slide_window), its median the middle value; the truncated
 * windows at the ends go to gsl_stats_median. */
static void moving_median(sl_fit_workspace *ws)
{
    const size_t half = SMOOTH_WINDOW / 2;
    double window[SMOOTH_WINDOW], sorted[SMOOTH_WINDOW];
    for (size_t i = 0; i < ws->n; i++) {
        size_t lo = i >= half ? i - half : 0, hi = GSL_MIN(i + half + 1, ws->n);
        if (hi - lo == SMOOTH_WINDOW && lo > 0 && i > half) {
            slide_window(sorted, ws->r[lo - 1], ws->r[hi - 1]);
            ws->smooth[i] = sorted[half];
        } else if (hi - lo == SMOOTH_WINDOW) {
            memcpy(sorted, ws->r + lo, sizeof sorted);
            gsl_sort(sorted, 1, SMOOTH_WINDOW);
            ws->smooth[i] = sorted[half];
        } else {
            memcpy(window, ws->r + lo, (hi - lo) * sizeof *window);
            ws->smooth[i] = gsl_stats_median(window, 1, hi - lo);
        }
    }
}

static bool strictly_descending(const double *v, size_t n)
{
    for (size_t i = 1; i < n; i++)
        if (!(v[i - 1] > v[i]))
            return false;
    return true;
}

/* The points in the opposite order, which for a strictly descending gate
 * is the order gsl_sort2 would give. */
static void reverse_points(sl_fit_workspace *ws, size_t n)
{
    for (size_t i = 0, j = n - 1; i < j; i++, j--) {
        double vg = ws->vg[i], r = ws->r[i];
        ws->vg[i] = ws->vg[j];
        ws->r[i] = ws->r[j];
        ws->vg[j] = vg;
        ws->r[j] = r;
    }
}

/* Sorted copies of the sweep, weights u = 1/R and the moving median. */
static void prepare(sl_fit_workspace *ws, const double *vg_V, const double *r_ohm, size_t n)
{
    ws->n = n;
    ws->fix_rc_zero = false;
    ws->have_state = false;
    memcpy(ws->vg, vg_V, n * sizeof *vg_V);
    memcpy(ws->r, r_ohm, n * sizeof *r_ohm);
    bool sorted = true;
    for (size_t i = 1; i < n && sorted; i++)
        sorted = ws->vg[i - 1] <= ws->vg[i];
    if (!sorted && strictly_descending(ws->vg, n))
        reverse_points(ws, n); /* a reverse branch: sorted by turning it round */
    else if (!sorted)
        gsl_sort2(ws->vg, 1, ws->r, 1, n);
    double saa = 0.0, sa1 = 0.0;
    for (size_t i = 0; i < n; i++) {
        double u = 1.0 / ws->r[i];
        ws->u[i] = u;
        saa += u * u;
        sa1 += u;
    }
    ws->saa = saa;
    ws->sa1 = sa1;
    moving_median(ws);
}

static double median_ohm(sl_fit_workspace *ws)
{
    memcpy(ws->col, ws->r, ws->n * sizeof *ws->r);
    gsl_sort(ws->col, 1, ws->n);
    return gsl_stats_median_from_sorted_data(ws->col, 1, ws->n);
}

/* Class decided from the readings alone, or SL_FIT_OK to go on fitting. */
static sl_fit_class classify_readings(sl_fit_workspace *ws, const sl_fit_config *cfg,
                                      const sweep_extremes *e)
{
    size_t n = ws->n;
    bool flat = e->s_min <= 0.0 || e->s_max / e->s_min - 1.0 < cfg->min_modulation;
    if (e->r_max < cfg->short_max_ohm)
        return SL_FIT_SHORT;
    if (flat && median_ohm(ws) < cfg->short_flat_max_ohm)
        return SL_FIT_SHORT;
    if (e->r_min <= 0.0 || flat)
        return SL_FIT_POOR;
    if (interior(e->s_peak, n) || interior(e->r_peak, n))
        return SL_FIT_OK;
    /* Highest at an end, smoothed or not: a neutrality point beyond the
     * sweep if the curve rises steadily towards it, otherwise noise without
     * a gate response. */
    double rho = gsl_stats_spearman(ws->vg, 1, ws->r, 1, n, ws->rank_work);
    return fabs(rho) >= MONOTONIC_MIN_RANK_CORRELATION ? SL_FIT_CNP_OUTSIDE : SL_FIT_POOR;
}

/* ---- results ---- */

static void set_nan(sl_fit_params *p)
{
    p->cnp_V = p->mobility_cm2_per_Vs = p->n0_per_cm2 = p->r_contact_ohm = NAN;
}

static void clear_result(sl_fit_result *out, size_t n_points)
{
    memset(out, 0, sizeof *out);
    set_nan(&out->p);
    set_nan(&out->sigma);
    out->rel_rms = out->r_squared = NAN;
    sl_est unknown = { NAN, NAN };
    out->electron_mobility_cm2_per_Vs = out->hole_mobility_cm2_per_Vs = unknown;
    out->electron_hole_mobility_ratio = unknown;
    out->n_points = n_points;
}

/* Relative RMS and R^2 of the fit. The mean reading for the total sum of
 * squares is summed in the same pass as the residuals (a fused
 * accumulation; gsl_stats_mean's running mean divides at every point). */
static void quality(sl_fit_result *out, sl_fit_workspace *ws)
{
    double ss_rel = 0.0, ss_res = 0.0, sum_r = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        double e = ws->r[i] - (ws->rc + ws->k * ws->s[i]);
        ss_res += e * e;
        ss_rel += (e * ws->u[i]) * (e * ws->u[i]);   /* u = 1/R */
        sum_r += ws->r[i];
    }
    double mean = sum_r / (double)ws->n;
    double ss_tot = gsl_stats_tss_m(ws->r, 1, ws->n, mean);
    out->rel_rms = sqrt(ss_rel / (double)ws->n);
    out->r_squared = ss_tot > 0.0 ? 1.0 - ss_res / ss_tot : 0.0;
}

/* Jacobian of the relative residuals in the natural parameters (V0, d, K,
 * R_c[, beta]) at the solution, and J^T J (lower triangle) into jtj. */
static gsl_matrix_view natural_jacobian(sl_fit_workspace *ws, const shape_at *at,
                                        gsl_matrix *jtj)
{
    size_t p = param_count(ws);
    double d = exp(at->b);
    gsl_matrix_view jac = gsl_matrix_view_array(ws->jac, ws->n, p);
    gsl_matrix_set_zero(jtj);
    for (size_t i = 0; i < ws->n; i++) {
        shape_grad sg = shape_gradient(ws, at, ws->vg[i]);
        double u = ws->u[i], ku = ws->k * u;
        double *row = ws->jac + i * p;
        row[0] = -ku * sg.ds[0];
        row[1] = -ku * sg.ds[1] / d;
        row[2] = -sg.s * u;
        row[3] = -u;
        if (ws->two_mobility)
            row[4] = -ku * sg.ds[2];
        for (size_t a = 0; a < p; a++)
            for (size_t b = 0; b <= a; b++)
                jtj->data[a * jtj->tda + b] += row[a] * row[b];
    }
    return jac;
}

/* The same J^T J from what a projection with gradient kept at the solution:
 * with t_j = u ds/dtheta_j the natural columns are -K t_0, -(K/d) t_1, -c,
 * -a[, -K t_2], so J^T J is made of the sums t_j . t_k (one light pass over
 * ws->ds), a . t_j and c . t_j (du_a, du_c) and the Gram matrix. Written for
 * a constant two_mobility (see natural_normal_matrix). */
static inline void natural_normal_from_sums(const sl_fit_workspace *ws, bool two_mobility,
                                            gsl_matrix *jtj)
{
    double t00 = 0.0, t10 = 0.0, t11 = 0.0, t20 = 0.0, t21 = 0.0, t22 = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        const double *ds = ws->ds + i * MAX_NONLINEAR;
        double t[MAX_NONLINEAR] = { ws->u[i] * ds[0], ws->u[i] * ds[1],
                                    two_mobility ? ws->u[i] * ds[2] : 0.0 };
        t00 += t[0] * t[0];
        t10 += t[1] * t[0];
        t11 += t[1] * t[1];
        if (two_mobility) {
            t20 += t[2] * t[0];
            t21 += t[2] * t[1];
            t22 += t[2] * t[2];
        }
    }
    double k = ws->k, kd = k * exp(-ws->at.b);
    const double *ta = ws->du_a, *tc = ws->du_c;
    const double lower[MAX_PARAMS][MAX_PARAMS] = {
        { k * k * t00 },
        { kd * k * t10, kd * kd * t11 },
        { k * tc[0], kd * tc[1], ws->scc },
        { k * ta[0], kd * ta[1], ws->sac, ws->saa },
        { k * k * t20, k * kd * t21, k * tc[2], k * ta[2], k * k * t22 },
    };
    for (size_t a = 0; a < (two_mobility ? 5u : 4u); a++)
        for (size_t b = 0; b <= a; b++)
            jtj->data[a * jtj->tda + b] = lower[a][b];
}

/* J^T J of the natural parameters at the solution *at (lower triangle) into
 * jtj; true when the rows of J are in ws->jac as well. */
static bool natural_normal_matrix(sl_fit_workspace *ws, const shape_at *at, gsl_matrix *jtj)
{
    if (!(ws->have_state && ws->have_gradient && same_shape(&ws->at, at))) {
        natural_jacobian(ws, at, jtj);
        return true;
    }
    if (ws->two_mobility)
        natural_normal_from_sums(ws, true, jtj);
    else
        natural_normal_from_sums(ws, false, jtj);
    return false;
}

/* (J^T J)^-1 by Cholesky from the normal matrix in cov, well conditioned at
 * a good fit; GSL's rank-revealing QR covariance from the rows of J when it
 * is not. */
static void unscaled_covariance(sl_fit_workspace *ws, const shape_at *at, gsl_matrix *cov,
                                bool have_rows)
{
    if (gsl_linalg_cholesky_decomp1(cov) == GSL_SUCCESS &&
        gsl_linalg_cholesky_invert(cov) == GSL_SUCCESS)
        return;
    gsl_matrix_view jac = have_rows ? gsl_matrix_view_array(ws->jac, ws->n, param_count(ws))
                                    : natural_jacobian(ws, at, cov);
    gsl_multifit_nlinear_covar(&jac.matrix, 0.0, cov);
}

/* Electron and hole mobilities mu e^(+-beta/2) with first-order errors from
 * var(ln mu_e,h) = var(K)/K^2 + var(beta)/4 -+ cov(K, beta)/K. */
static void fill_two_mobilities(sl_fit_result *out, const sl_fit_workspace *ws,
                                const gsl_matrix *cov, double var, double beta)
{
    double mu = out->p.mobility_cm2_per_Vs, k = ws->k;
    double v_lnk = var * gsl_matrix_get(cov, 2, 2) / (k * k);
    double v_beta = ws->two_mobility ? var * gsl_matrix_get(cov, 4, 4) : 0.0;
    double c_lnk_beta = ws->two_mobility ? -var * gsl_matrix_get(cov, 4, 2) / k : 0.0;
    double mu_e = mu * exp(0.5 * beta), mu_h = mu * exp(-0.5 * beta);
    out->electron_mobility_cm2_per_Vs.val = mu_e;
    out->electron_mobility_cm2_per_Vs.sigma = mu_e * sqrt(v_lnk + 0.25 * v_beta + c_lnk_beta);
    out->hole_mobility_cm2_per_Vs.val = mu_h;
    out->hole_mobility_cm2_per_Vs.sigma = mu_h * sqrt(v_lnk + 0.25 * v_beta - c_lnk_beta);
    out->electron_hole_mobility_ratio.val = exp(beta);
    out->electron_hole_mobility_ratio.sigma = exp(beta) * sqrt(v_beta);
}

/* Parameters in trade units and their standard errors from the covariance
 * (J^T J)^-1 scaled by the residual variance chi^2 / (n - p). */
static void fill_parameters(sl_fit_result *out, sl_fit_workspace *ws, const sl_fit_config *cfg,
                            const shape_at *at)
{
    double cg = cfg->gate_capacitance_F_per_m2, d = exp(at->b);
    double n0_per_cm2_per_V = cg / SL_SI_ELEMENTARY_CHARGE * SL_PER_CM2_PER_PER_M2;
    out->p.cnp_V = at->v0;
    out->p.n0_per_cm2 = d * n0_per_cm2_per_V;
    out->p.mobility_cm2_per_Vs = cfg->length_over_width / (cg * ws->k) / SL_M2_PER_CM2;
    out->p.r_contact_ohm = ws->rc;
    size_t p = param_count(ws);
    gsl_matrix_view cov = gsl_matrix_submatrix(ws->cov, 0, 0, p, p);
    bool have_rows = natural_normal_matrix(ws, at, &cov.matrix);
    unscaled_covariance(ws, at, &cov.matrix, have_rows);
    double var = ws->chisq / (double)(ws->n - p);
    double sd[MAX_PARAMS];
    for (size_t j = 0; j < p; j++)
        sd[j] = sqrt(var * gsl_matrix_get(&cov.matrix, j, j));
    out->sigma.cnp_V = sd[0];
    out->sigma.n0_per_cm2 = sd[1] * n0_per_cm2_per_V;
    out->sigma.mobility_cm2_per_Vs = out->p.mobility_cm2_per_Vs * sd[2] / ws->k;
    out->sigma.r_contact_ohm = sd[3];
    fill_two_mobilities(out, ws, &cov.matrix, var, at->beta);
}

/* Projected search, with R_c held at its bound 0 when the free optimum is
 * negative. */
static int projected_search(sl_fit_workspace *ws, const sl_fit_config *cfg, shape_at *at,
                            int *iterations)
{
    ws->fix_rc_zero = false;
    int st = run_search(ws, cfg, at, iterations);
    if (st == GSL_SUCCESS && ws->rc < 0.0) {
        ws->fix_rc_zero = true;
        st = run_search(ws, cfg, at, iterations);
    }
    return st;
}

/* A usable solution: finite numbers, a width that did not underflow to zero
 * and an asymmetry whose hyperbolic functions did not overflow. */
static bool solution_finite(const sl_fit_workspace *ws, const shape_at *at)
{
    return isfinite(at->v0) && at->d2 > 0.0 && isfinite(at->d2) && isfinite(at->ch) &&
           isfinite(ws->k) && isfinite(ws->rc) && isfinite(ws->chisq);
}

/* The chosen search, the full one as fallback when the projected one fails. */
static sl_fit_class search(sl_fit_workspace *ws, const sl_fit_config *cfg, shape_at *at,
                           int *iterations)
{
    shape_at start = *at;
    int st = GSL_FAILURE;
    if (cfg->method == SL_FIT_METHOD_PROJECTED)
        st = projected_search(ws, cfg, at, iterations);
    if (st != GSL_SUCCESS || !solution_finite(ws, at)) {
        /* made when first needed: a fallback, and sized for the sweep */
        if (!ensure_full_solver(ws, ws->n)) {
            ws->out_of_memory = true;
            return SL_FIT_NO_CONVERGENCE;
        }
        *at = start;
        st = run_full_search(ws, cfg, at, iterations);
    }
    if (st != GSL_SUCCESS || !solution_finite(ws, at))
        return SL_FIT_NO_CONVERGENCE;
    if (ws->k <= 0.0)
        return SL_FIT_POOR;   /* a dip, not a peak */
    return SL_FIT_OK;
}

static sl_status check_input(const sl_fit_workspace *ws, const sl_fit_config *cfg,
                             const double *vg_V, size_t n)
{
    if (n < SL_FIT_MIN_POINTS || n > ws->max_points)
        return SL_EINPUT;
    if (!(cfg->gate_capacitance_F_per_m2 > 0.0) || !(cfg->length_over_width > 0.0) ||
        cfg->max_iterations < 1)
        return SL_EINPUT;
    /* a table made for another gate stack would bias every parameter */
    if (cfg->density_table &&
        !(fabs(sl_physics_density_table_capacitance_F_per_m2(cfg->density_table) /
                   cfg->gate_capacitance_F_per_m2 - 1.0) <= 1e-9))
        return SL_EINPUT;
    bool distinct = false;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(vg_V[i]))
            return SL_EINPUT;
        distinct = distinct || vg_V[i] != vg_V[0];
    }
    return distinct ? SL_OK : SL_EINPUT;
}

/* Written so that NaN counts as poor. */
static bool poor_quality(const sl_fit_result *out, const sl_fit_config *cfg)
{
    return !(out->rel_rms <= cfg->poor_max_rel_rms) ||
           !(out->r_squared >= cfg->poor_min_r_squared);
}

/* Mark spikes in ws->col (1 = spike) and return their number, 0 when there
 * are none or too many to call them glitches. */
static size_t find_spikes(sl_fit_workspace *ws)
{
    size_t n = ws->n;
    double *f = ws->rank_work, *work = ws->rank_work + n;
    for (size_t i = 0; i < n; i++)
        f[i] = projected_residual_at(ws, i);
    double sigma = gsl_stats_mad(f, 1, n, work);
    size_t count = 0;
    for (size_t i = 0; i < n; i++) {
        ws->col[i] = fabs(f[i]) > SPIKE_MIN_SIGMAS * sigma;
        count += ws->col[i] != 0.0;
    }
    size_t cap = GSL_MAX((size_t)(SPIKE_MAX_FRACTION * (double)n), 1);
    return count <= cap && n - count >= SL_FIT_MIN_POINTS ? count : 0;
}

/* Drop the points marked in ws->col from the sorted arrays. */
static void drop_marked(sl_fit_workspace *ws)
{
    size_t kept = 0;
    double saa = 0.0, sa1 = 0.0;
    for (size_t i = 0; i < ws->n; i++) {
        if (ws->col[i] != 0.0)
            continue;
        ws->vg[kept] = ws->vg[i];
        ws->r[kept] = ws->r[i];
        ws->u[kept] = ws->u[i];
        saa += ws->u[i] * ws->u[i];
        sa1 += ws->u[i];
        kept++;
    }
    ws->saa = saa;
    ws->sa1 = sa1;
    ws->n = kept;
    ws->have_state = false;
}

/* When a few spikes alone make the fit poor, fit again without them. */
static sl_status refit_without_spikes(sl_fit_result *out, sl_fit_workspace *ws,
                                      const sl_fit_config *cfg, shape_at *at)
{
    size_t spikes = find_spikes(ws);
    if (spikes == 0)
        return SL_OK;
    drop_marked(ws);
    out->n_spikes = spikes;
    out->cls = search(ws, cfg, at, &out->iterations);
    if (ws->out_of_memory)
        return SL_ENOMEM;
    if (out->cls != SL_FIT_NO_CONVERGENCE)
        quality(out, ws);
    return SL_OK;
}

sl_status sl_fit_sweep(sl_fit_result *out, sl_fit_workspace *ws, const sl_fit_config *cfg,
                       const double *vg_V, const double *r_ohm, size_t n_points)
{
    clear_result(out, n_points);
    sl_status st = check_input(ws, cfg, vg_V, n_points);
    if (st != SL_OK)
        return st;
    if (any_open(r_ohm, n_points, cfg->open_min_ohm)) {
        out->cls = SL_FIT_OPEN;
        return SL_OK;
    }
    ws->two_mobility = cfg->model == SL_FIT_MODEL_TWO_MOBILITY;
    ws->density = cfg->density_table;
    ws->out_of_memory = false;
    if (!ensure_projected_solver(ws))
        return SL_ENOMEM;
    prepare(ws, vg_V, r_ohm, n_points);
    sweep_extremes extremes = find_extremes(ws);
    out->cls = classify_readings(ws, cfg, &extremes);
    if (out->cls != SL_FIT_OK)
        return SL_OK;
    shape_at at = shape_setup(ws->vg[n_points / 2], 0.0, 0.0);
    choose_start(ws, &extremes, &at);
    out->cls = search(ws, cfg, &at, &out->iterations);
    if (ws->out_of_memory)
        return SL_ENOMEM;
    if (out->cls == SL_FIT_NO_CONVERGENCE)
        return SL_OK;
    quality(out, ws);
    if (out->cls == SL_FIT_OK && poor_quality(out, cfg)) {
        st = refit_without_spikes(out, ws, cfg, &at);
        if (st != SL_OK || out->cls == SL_FIT_NO_CONVERGENCE)
            return st;
    }
    /* A poor fit says nothing about where the neutrality point is. */
    if (out->cls == SL_FIT_OK && poor_quality(out, cfg))
        out->cls = SL_FIT_POOR;
    else if (out->cls == SL_FIT_OK && (at.v0 < ws->vg[0] || at.v0 > ws->vg[ws->n - 1]))
        out->cls = SL_FIT_CNP_OUTSIDE;
    if (out->cls == SL_FIT_OK)
        fill_parameters(out, ws, cfg, &at);
    return SL_OK;
}

/* ---- double sweeps: a forward and a reverse branch, fitted apart ---- */

size_t sl_fit_sweep_turn(const double *vg_V, size_t n_points)
{
    int way = 0, turns = 0;
    size_t turn = 0;
    for (size_t i = 1; i < n_points; i++) {
        double d = vg_V[i] - vg_V[i - 1];
        int s = (d > 0) - (d < 0); /* 0 for a repeated voltage (or NaN) */
        if (s == 0)
            continue;
        if (way != 0 && s != way) {
            turns++;
            turn = i;
        }
        way = s;
    }
    return turns == 1 ? turn : 0;
}

/* Two estimates of one quantity from independent branches: their mean. */
static double mean2(double a, double b) { return 0.5 * (a + b); }
static double mean2_se(double a, double b) { return 0.5 * hypot(a, b); }

static void combine_params(sl_fit_params *out, const sl_fit_params *a, const sl_fit_params *b,
                           int is_sigma)
{
    double (*f)(double, double) = is_sigma ? mean2_se : mean2;
    out->cnp_V = f(a->cnp_V, b->cnp_V);
    out->mobility_cm2_per_Vs = f(a->mobility_cm2_per_Vs, b->mobility_cm2_per_Vs);
    out->n0_per_cm2 = f(a->n0_per_cm2, b->n0_per_cm2);
    out->r_contact_ohm = f(a->r_contact_ohm, b->r_contact_ohm);
}

static sl_est combine_est(sl_est a, sl_est b)
{
    return (sl_est){ mean2(a.val, b.val), mean2_se(a.sigma, b.sigma) };
}

static void combine_branches(sl_fit_double_result *d, size_t n_points)
{
    const sl_fit_result *f = &d->forward, *r = &d->reverse;
    if (f->cls != SL_FIT_OK || r->cls != SL_FIT_OK) {
        d->device = f->cls != SL_FIT_OK ? *f : *r;
        d->device.n_points = n_points;
        return;
    }
    sl_fit_result *o = &d->device;
    *o = *f;
    combine_params(&o->p, &f->p, &r->p, 0);
    combine_params(&o->sigma, &f->sigma, &r->sigma, 1);
    o->electron_mobility_cm2_per_Vs =
        combine_est(f->electron_mobility_cm2_per_Vs, r->electron_mobility_cm2_per_Vs);
    o->hole_mobility_cm2_per_Vs = combine_est(f->hole_mobility_cm2_per_Vs, r->hole_mobility_cm2_per_Vs);
    o->electron_hole_mobility_ratio =
        combine_est(f->electron_hole_mobility_ratio, r->electron_hole_mobility_ratio);
    o->rel_rms = fmax(f->rel_rms, r->rel_rms);
    o->r_squared = fmin(f->r_squared, r->r_squared);
    o->iterations = f->iterations + r->iterations;
    o->n_spikes = f->n_spikes + r->n_spikes;
    o->n_points = n_points;
    d->hysteresis_V = r->p.cnp_V - f->p.cnp_V;
}

/* Split by the direction of each point: forward points first in buf, then
 * reverse; *n_forward of them. False when a point has none or a branch is
 * empty. */
static bool split_by_direction(double *buf, size_t *n_forward, const double *vg_V,
                               const double *r_ohm, const signed char *direction, size_t n)
{
    size_t nf = 0, nr = 0;
    for (size_t i = 0; i < n; i++) {
        if (direction[i] == 0)
            return false;
        nf += direction[i] > 0;
    }
    if (nf == 0 || nf == n)
        return false;
    double *vg = buf, *r = buf + n;
    for (size_t i = 0, k = 0; i < n; i++) {
        size_t at = direction[i] > 0 ? k++ : nf + nr++;
        vg[at] = vg_V[i];
        r[at] = r_ohm[i];
    }
    *n_forward = nf;
    return true;
}

sl_status sl_fit_double_sweep(sl_fit_double_result *out, sl_fit_workspace *ws,
                              const sl_fit_config *cfg, const double *vg_V, const double *r_ohm,
                              const signed char *direction, size_t n_points)
{
    memset(out, 0, sizeof *out);
    out->hysteresis_V = NAN;
    double *buf = NULL;
    const double *vg = vg_V, *r = r_ohm;
    size_t n_forward = 0;
    if (direction) {
        buf = malloc(2 * (n_points ? n_points : 1) * sizeof *buf);
        if (!buf)
            return SL_ENOMEM;
        if (split_by_direction(buf, &n_forward, vg_V, r_ohm, direction, n_points)) {
            vg = buf;
            r = buf + n_points;
        }
    } else {
        n_forward = sl_fit_sweep_turn(vg_V, n_points);
    }
    size_t n_reverse = n_points - n_forward;
    sl_status st;
    if (n_forward < SL_FIT_MIN_POINTS || n_reverse < SL_FIT_MIN_POINTS) {
        st = sl_fit_sweep(&out->device, ws, cfg, vg_V, r_ohm, n_points);
    } else {
        out->is_double = 1;
        st = sl_fit_sweep(&out->forward, ws, cfg, vg, r, n_forward);
        if (st == SL_OK)
            st = sl_fit_sweep(&out->reverse, ws, cfg, vg + n_forward, r + n_forward, n_reverse);
        if (st == SL_OK)
            combine_branches(out, n_points);
    }
    free(buf);
    return st;
}
