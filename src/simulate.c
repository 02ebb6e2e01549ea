/* SPDX-License-Identifier: MIT
 * Synthetic lot drawn from a plan's model (see include/splitlot/simulate.h),
 * with GSL's random generators: for demos, tests and benchmarks only.
 */
#include "splitlot/simulate.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "splitlot/fit.h"
#include "splitlot/physics.h"
#include "splitlot/predict.h"

#define SL_SIM_MAX_LAYERS 32

typedef enum { DEV_GOOD = 0, DEV_SHIFTED, DEV_SHORT, DEV_OPEN, DEV_CNP_OUTSIDE, DEV_POOR, DEV_UNPROBED } device_kind;

static const char *const kind_names[] = { "good", "shifted", "short", "open",
                                          "cnp-outside-sweep", "poor-fit", "unprobed" };

typedef struct {
    const sl_plan *plan;
    const sl_layout *layout;
    const sl_simulate_options *opt;
    gsl_rng *rng;
    gsl_rng *rng_later;     /* noise of the plan's later temperatures: the first
                               temperature's files stay as one temperature made them */
    double baseline_true;
    double *dielectric_true, *treatment_true; /* cm^-2 */
    double *load_offset;    /* per layout load, cm^-2 */
    double wafer_sigma_per_cm2, device_sigma_V;
    FILE *results, *sweeps, *truth;
    sl_simulate_summary *sum;
    long fault_counter;
    size_t first_t, end_t;  /* the plan temperatures measured: [first_t, end_t) */
} sim_ctx;

/* One wafer's drawn stack and offsets. */
typedef struct {
    size_t index;
    long split;
    double cg;              /* F/m^2 */
    double doping_offset;   /* cm^-2 */
    double gate_min_V, gate_max_V;
    sl_fit_config fit;
} sim_wafer;

typedef struct {
    long number, die_x, die_y;
    device_kind kind;
    sl_fit_params p;
    double doping_per_cm2;
    long type;              /* plan device type, -1 without device_types */
    sl_fit_config fit;      /* the wafer's gate with the device's own channel */
} sim_device;

void sl_simulate_options_default(sl_simulate_options *opt, uint64_t seed)
{
    memset(opt, 0, sizeof *opt);
    opt->seed = seed;
    opt->points_per_sweep = 201;
    opt->noise_rel = 0.005;
    opt->fault_fraction = 0.02;
    opt->shifted_fraction = 0.005;
    opt->shift_V = 3.0;
    opt->wafer_doping_sigma_per_cm2 = 1.0e11;
    opt->write_sweeps = 1;
}

static double draw_level(sim_ctx *c, const char *name, sl_est planned, int *used)
{
    for (size_t i = 0; i < c->opt->n_overrides; i++)
        if (strcmp(c->opt->overrides[i].level, name) == 0) {
            used[i] = 1;
            return c->opt->overrides[i].doping_per_cm2;
        }
    return planned.val + (c->opt->draw_levels ? gsl_ran_gaussian(c->rng, planned.sigma) : 0.0);
}

static void write_level(FILE *f, const char *factor, const char *level, sl_est planned,
                        double truth)
{
    fprintf(f, "%s,%s,%.6g,%.6g,%.6g\n", factor, level, planned.val, planned.sigma, truth);
}

static sl_status draw_levels(sim_ctx *c, const char *out_dir, sl_diag *diag)
{
    const sl_plan *p = c->plan;
    int *used = calloc(c->opt->n_overrides + 1, sizeof *used);
    c->dielectric_true = calloc(p->n_dielectrics + 1, sizeof(double));
    c->treatment_true = calloc(p->n_treatments + 1, sizeof(double));
    if (!used || !c->dielectric_true || !c->treatment_true) {
        free(used);
        return SL_ENOMEM;
    }
    c->baseline_true = draw_level(c, "baseline", p->baseline_doping_per_cm2, used);
    for (size_t i = 0; i < p->n_dielectrics; i++)
        c->dielectric_true[i] = draw_level(c, p->dielectrics[i].name, p->dielectrics[i].doping_per_cm2, used);
    for (size_t i = 0; i < p->n_treatments; i++)
        c->treatment_true[i] = draw_level(c, p->treatments[i].name, p->treatments[i].doping_per_cm2, used);
    sl_status st = SL_OK;
    for (size_t i = 0; i < c->opt->n_overrides; i++)
        if (!used[i]) {
            sl_diag_error(diag, "--true-doping: '%s' is not a dielectric, treatment or 'baseline' of the plan",
                          c->opt->overrides[i].level);
            st = SL_EINPUT;
        }
    free(used);
    if (st != SL_OK)
        return st;
    char path[4096];
    snprintf(path, sizeof path, "%s/levels.csv", out_dir);
    FILE *f = fopen(path, "w");
    if (!f) {
        sl_diag_add(diag, SL_SEV_ERROR, path, 0, 0, "cannot write the file");
        return SL_EIO;
    }
    fprintf(f, "factor,level,planned_per_cm2,planned_sigma_per_cm2,true_per_cm2\n");
    write_level(f, "baseline", "baseline", p->baseline_doping_per_cm2, c->baseline_true);
    for (size_t i = 0; i < p->n_dielectrics; i++)
        write_level(f, "dielectric", p->dielectrics[i].name, p->dielectrics[i].doping_per_cm2,
                    c->dielectric_true[i]);
    for (size_t i = 0; i < p->n_treatments; i++)
        write_level(f, "treatment", p->treatments[i].name, p->treatments[i].doping_per_cm2,
                    c->treatment_true[i]);
    return fclose(f) == 0 ? SL_OK : SL_EIO;
}

/* The scatter of the plan's variation block; without it the options' wafer
 * scatter and the resolve block's device scatter (or 1.5e11 cm^-2). */
static void scatter_model(sim_ctx *c)
{
    const sl_plan *p = c->plan;
    c->wafer_sigma_per_cm2 = p->variation.present ? p->variation.wafer_sigma_per_cm2
                                                  : c->opt->wafer_doping_sigma_per_cm2;
    c->device_sigma_V = p->variation.present ? p->variation.device_sigma_V
                                             : (p->resolve.device_sigma_V > 0.0
                                                    ? p->resolve.device_sigma_V : -1.0);
}

/* One offset per load of a batched step (load-to-load scatter). */
static sl_status draw_loads(sim_ctx *c)
{
    const sl_layout *l = c->layout;
    if (l->n_loads == 0)
        return SL_OK;
    c->load_offset = malloc(l->n_loads * sizeof *c->load_offset);
    if (!c->load_offset)
        return SL_ENOMEM;
    for (size_t k = 0; k < l->n_loads; k++)
        c->load_offset[k] = gsl_ran_gaussian(c->rng, c->plan->variation.batch_sigma_per_cm2);
    return SL_OK;
}

/* The offsets of the loads a wafer went through. */
static double load_offsets(const sim_ctx *c, size_t wafer)
{
    const sl_layout *l = c->layout;
    double sum = 0.0;
    for (size_t k = 0; k < l->n_loads; k++)
        if (l->wafers[wafer].load[l->loads[k].batch] == l->loads[k].number)
            sum += c->load_offset[k];
    return sum;
}

static sl_status draw_wafer(sim_ctx *c, sim_wafer *w)
{
    const sl_plan *p = c->plan;
    size_t d = p->splits[w->split].dielectric;
    sl_layer layers[SL_SIM_MAX_LAYERS];
    size_t n = 0;
    sl_status st = sl_plan_stack(p, d, layers, SL_SIM_MAX_LAYERS, &n);
    if (st != SL_OK)
        return st;
    for (size_t i = 0; i < n; i++) {
        double t = layers[i].thickness_m + gsl_ran_gaussian(c->rng, layers[i].thickness_sigma_m);
        layers[i].thickness_m = fmax(t, 0.2 * layers[i].thickness_m);
    }
    w->cg = sl_physics_stack_capacitance_F_per_m2(layers, n);
    w->doping_offset = gsl_ran_gaussian(c->rng, c->wafer_sigma_per_cm2) + load_offsets(c, w->index);
    int from_plan;
    sl_predict_gate_range(&w->gate_min_V, &w->gate_max_V, &from_plan, p, d);
    sl_fit_config_default(&w->fit, w->cg, p->channel_length_um, p->channel_width_um);
    return SL_OK;
}

static device_kind draw_kind(sim_ctx *c)
{
    double u = gsl_rng_uniform(c->rng);
    if (u > c->plan->expected_yield + c->opt->fault_fraction)
        return DEV_UNPROBED;
    if (u < c->opt->fault_fraction)
        return (device_kind)(DEV_SHORT + (c->fault_counter++ % 4));
    if (u < c->opt->fault_fraction + c->opt->shifted_fraction)
        return DEV_SHIFTED;
    return DEV_GOOD;
}

static void draw_device(sim_ctx *c, const sim_wafer *w, sim_device *dev)
{
    const sl_plan *p = c->plan;
    const sl_plan_split *s = &p->splits[w->split];
    double n = c->baseline_true + c->dielectric_true[s->dielectric] + w->doping_offset;
    for (size_t i = 0; i < s->n_treatments; i++)
        n += c->treatment_true[s->treatments[i]];
    double per_cm2_per_V = w->cg / SL_SI_ELEMENTARY_CHARGE * SL_PER_CM2_PER_PER_M2;
    double device_sigma = c->device_sigma_V >= 0.0 ? c->device_sigma_V * per_cm2_per_V : 1.5e11;
    n += gsl_ran_gaussian(c->rng, device_sigma);
    dev->kind = draw_kind(c);
    dev->doping_per_cm2 = n;
    dev->p.cnp_V = -n / per_cm2_per_V;
    if (dev->kind == DEV_SHIFTED)
        dev->p.cnp_V += (gsl_rng_uniform(c->rng) < 0.5 ? -1.0 : 1.0) * c->opt->shift_V;
    if (dev->kind == DEV_CNP_OUTSIDE)
        dev->p.cnp_V = w->gate_max_V + 0.3 * (w->gate_max_V - w->gate_min_V);
    double disorder = p->disorder_density_per_cm2 > 0 ? p->disorder_density_per_cm2 : 1.5e11;
    dev->p.mobility_cm2_per_Vs = 2000.0 * exp(gsl_ran_gaussian(c->rng, 0.3));
    /* the puddles' density and the thermal floor of the first temperature
     * in quadrature: no device below the floor (see params_at) */
    double floor = sl_physics_thermal_floor_per_m2(p->temperatures_K[0], p->fermi_velocity_m_s) *
                   SL_PER_CM2_PER_PER_M2;
    dev->p.n0_per_cm2 = hypot(disorder * exp(gsl_ran_gaussian(c->rng, 0.3)), floor);
    dev->p.r_contact_ohm = 400.0 * exp(gsl_ran_gaussian(c->rng, 0.3));
}

/* The transfer curve with n_g from the charge balance solved at vg, at the
 * measurement temperature (K). */
static double transfer_ohm(const sim_ctx *c, const sim_wafer *w, const sl_fit_config *fit,
                           const sl_fit_params *p, double temperature_K, double vg)
{
    double vf = c->plan->fermi_velocity_m_s, mu = 0.0;
    if (sl_physics_solve_fermi_J(&mu, vg, p->cnp_V, w->cg, temperature_K, vf) != SL_OK)
        return NAN;
    double ng = sl_physics_net_density_per_m2(mu, temperature_K, vf);
    return sl_fit_model_at_density_ohm(p, fit, ng);
}

static double sweep_point_ohm(gsl_rng *rng, const sim_ctx *c, const sim_wafer *w,
                              const sim_device *dev, const sl_fit_params *p,
                              double temperature_K, double vg)
{
    double noise = 1.0 + gsl_ran_gaussian(rng, c->opt->noise_rel);
    switch (dev->kind) {
    case DEV_SHORT: return 5.0 * noise;
    case DEV_OPEN: return 5.0e10 * noise;
    case DEV_POOR: return 1.0e4 * (1.0 + gsl_ran_gaussian(rng, 0.3));
    default: return transfer_ohm(c, w, &dev->fit, p, temperature_K, vg) * noise;
    }
}

/* The device at the plan's temperature t: the same neutrality point, its
 * residual density the drawn one at the first temperature with the thermal
 * floor of the other in its place, n0(T)^2 = n0(T0)^2 - n_th(T0)^2 +
 * n_th(T)^2 (the floor adds in quadrature to the puddles' density, common
 * practice), never below the floor. */
static sl_fit_params params_at(const sim_ctx *c, const sim_device *dev, size_t t)
{
    sl_fit_params p = dev->p;
    if (t == 0)
        return p;
    double v = c->plan->fermi_velocity_m_s;
    double first = sl_physics_thermal_floor_per_m2(c->plan->temperatures_K[0], v) *
                   SL_PER_CM2_PER_PER_M2;
    double here = sl_physics_thermal_floor_per_m2(c->plan->temperatures_K[t], v) *
                  SL_PER_CM2_PER_PER_M2;
    double puddles2 = fmax(p.n0_per_cm2 * p.n0_per_cm2 - first * first, 0.0);
    p.n0_per_cm2 = sqrt(puddles2 + here * here);
    return p;
}

/* The device_type column's text (with device_types only). */
static const char *type_sep(const sim_device *dev) { return dev->type >= 0 ? "," : ""; }
static const char *type_name(const sim_ctx *c, const sim_device *dev)
{
    return dev->type >= 0 ? c->plan->device_types[dev->type].name : "";
}

static void write_sweep(sim_ctx *c, const sim_wafer *w, const sim_device *dev, size_t t)
{
    gsl_rng *rng = t == 0 ? c->rng : c->rng_later;
    sl_fit_params p = params_at(c, dev, t);
    const char *wafer = c->plan->wafers[w->index];
    long n = c->opt->points_per_sweep;
    for (long i = 0; i < n; i++) {
        double vg = w->gate_min_V + (w->gate_max_V - w->gate_min_V) * (double)i / (double)(n - 1);
        fprintf(c->sweeps, "%s,D%03ld,%ld,%ld,%.4f,%.6g,%g%s%s\n", wafer, dev->number,
                dev->die_x, dev->die_y, vg,
                sweep_point_ohm(rng, c, w, dev, &p, c->plan->temperatures_K[t], vg),
                c->plan->temperatures_K[t], type_sep(dev), type_name(c, dev));
    }
    c->sum->sweep_rows += n;
}

/* The device's results row at temperature t: measured values when usable,
 * an empty neutrality voltage for a faulty device (probed, no neutrality
 * point). */
static void write_result(sim_ctx *c, const sim_wafer *w, const sim_device *dev, size_t t)
{
    gsl_rng *rng = t == 0 ? c->rng : c->rng_later;
    sl_fit_params p = params_at(c, dev, t);
    fprintf(c->results, "%s,D%03ld,%ld,%ld,", c->plan->wafers[w->index], dev->number, dev->die_x,
            dev->die_y);
    if (dev->kind == DEV_GOOD || dev->kind == DEV_SHIFTED)
        fprintf(c->results, "%.4f,%.1f,%.4g,%.1f,%g%s%s\n", p.cnp_V + gsl_ran_gaussian(rng, 0.02),
                p.mobility_cm2_per_Vs * (1.0 + gsl_ran_gaussian(rng, 0.02)), p.n0_per_cm2,
                p.r_contact_ohm, c->plan->temperatures_K[t], type_sep(dev), type_name(c, dev));
    else
        fprintf(c->results, ",,,,%g%s%s\n", c->plan->temperatures_K[t], type_sep(dev),
                type_name(c, dev));
}

static void write_device(sim_ctx *c, const sim_wafer *w, const sim_device *dev)
{
    /* a device lost to yield was never probed: it is in the truth only;
     * a probed one is measured at every temperature of the plan */
    for (size_t t = c->first_t; dev->kind != DEV_UNPROBED && t < c->end_t; t++) {
        write_result(c, w, dev, t);
        if (c->opt->write_sweeps)
            write_sweep(c, w, dev, t);
    }
    fprintf(c->truth, "%s,D%03ld,%ld,%ld,%s,%s,%.6g,%.6g,%.6g,%.6g,%.6g,%.6g%s%s\n",
            c->plan->wafers[w->index], dev->number, dev->die_x, dev->die_y,
            c->plan->splits[w->split].name, kind_names[dev->kind], dev->p.cnp_V,
            dev->p.mobility_cm2_per_Vs, dev->p.n0_per_cm2, dev->p.r_contact_ohm,
            dev->doping_per_cm2, w->cg * SL_NF_CM2_PER_F_M2, type_sep(dev), type_name(c, dev));
    c->sum->devices++;
    c->sum->faulty += dev->kind >= DEV_SHORT && dev->kind <= DEV_POOR;
    c->sum->shifted += dev->kind == DEV_SHIFTED;
}

static sl_status simulate_wafers(sim_ctx *c)
{
    const sl_plan *p = c->plan;
    long per_wafer = c->opt->devices_per_wafer > 0 ? c->opt->devices_per_wafer : p->devices_per_wafer;
    long cells = p->wafer_rows * p->wafer_cols;
    for (size_t i = 0; i < c->layout->n_wafers; i++) {
        sim_wafer w = { .index = i, .split = c->layout->wafers[i].split };
        if (w.split < 0)
            continue;
        sl_status st = draw_wafer(c, &w);
        if (st != SL_OK)
            return st;
        c->sum->wafers++;
        for (long k = 0; k < per_wafer; k++) {
            /* devices_per_die neighbours share a die; coordinates as the
             * prober counts them, from wafer_map.first_die */
            long die = (k / p->devices_per_die) % cells;
            sim_device dev = { .number = k + 1, .die_x = p->first_die_x + die % p->wafer_cols,
                               .die_y = p->first_die_y + die / p->wafer_cols, .type = -1,
                               .fit = w.fit };
            if (p->n_device_types > 0) { /* the die's transistors in the plan's order */
                dev.type = (long)((size_t)k % p->n_device_types);
                const sl_plan_device_type *ty = &p->device_types[dev.type];
                dev.fit.length_over_width = ty->channel_length_um / ty->channel_width_um;
            }
            draw_device(c, &w, &dev);
            write_device(c, &w, &dev);
        }
    }
    return SL_OK;
}

/* A file with its header line, which ends with a device_type column when
 * typed (plans with device_types). */
static FILE *open_out(const char *dir, const char *name, const char *header, bool typed,
                      sl_diag *diag)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *f = fopen(path, "w");
    if (!f) {
        sl_diag_add(diag, SL_SEV_ERROR, path, 0, 0, "cannot write the file");
        return NULL;
    }
    setvbuf(f, NULL, _IOFBF, 1 << 20);
    fprintf(f, "%s%s\n", header, typed ? ",device_type" : "");
    return f;
}

static sl_status close_out(FILE *f, sl_status st)
{
    if (f && fclose(f) != 0 && st == SL_OK)
        return SL_EIO;
    return st;
}

/* Every plan temperature, or the one asked for (within 0.5 K). */
static sl_status choose_temperatures(sim_ctx *c, sl_diag *diag)
{
    c->first_t = 0;
    c->end_t = c->plan->n_temperatures;
    double only = c->opt->only_temperature_K;
    if (only == 0.0 || isnan(only))
        return SL_OK;
    for (size_t t = 0; t < c->plan->n_temperatures; t++)
        if (fabs(c->plan->temperatures_K[t] - only) <= 0.5) {
            c->first_t = t;
            c->end_t = t + 1;
            return SL_OK;
        }
    sl_diag_error(diag, "temperature %g K is not one of the plan's temperatures", only);
    return SL_EINPUT;
}

sl_status sl_simulate_lot(sl_simulate_summary *out, const sl_plan *plan, const sl_layout *layout,
                          const sl_simulate_options *options, const char *out_dir,
                          sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    sim_ctx c = { .plan = plan, .layout = layout, .opt = options, .sum = out };
    c.rng = gsl_rng_alloc(gsl_rng_mt19937);
    c.rng_later = gsl_rng_alloc(gsl_rng_mt19937);
    if (!c.rng || !c.rng_later) {
        gsl_rng_free(c.rng);
        gsl_rng_free(c.rng_later);
        return SL_ENOMEM;
    }
    gsl_rng_set(c.rng, (unsigned long)(options->seed & 0xffffffffu));
    gsl_rng_set(c.rng_later, (unsigned long)((options->seed >> 32) ^ (options->seed & 0xffffffffu) ^
                                             0x5bd1e995u));
    scatter_model(&c);
    sl_status st = choose_temperatures(&c, diag);
    if (st == SL_OK)
        st = draw_levels(&c, out_dir, diag);
    if (st == SL_OK)
        st = draw_loads(&c);
    if (st == SL_OK) {
        bool typed = plan->n_device_types > 0;
        c.results = open_out(out_dir, "results.csv",
            "wafer,device,die_x,die_y,v_cnp_V,mobility_cm2_per_Vs,n0_per_cm2,r_contact_ohm,temperature_K", typed, diag);
        c.sweeps = options->write_sweeps
                       ? open_out(out_dir, "sweeps.csv",
                                  "wafer,device,die_x,die_y,vg_V,r_ohm,temperature_K", typed,
                                  diag)
                       : NULL;
        c.truth = open_out(out_dir, "truth.csv",
            "wafer,device,die_x,die_y,split,kind,cnp_V,mobility_cm2_per_Vs,n0_per_cm2,r_contact_ohm,"
            "doping_per_cm2,gate_capacitance_nF_per_cm2", typed, diag);
        st = (c.results && c.truth && (c.sweeps || !options->write_sweeps)) ? SL_OK : SL_EIO;
    }
    if (st == SL_OK)
        st = simulate_wafers(&c);
    st = close_out(c.results, st);
    st = close_out(c.sweeps, st);
    st = close_out(c.truth, st);
    free(c.dielectric_true);
    free(c.treatment_true);
    free(c.load_offset);
    gsl_rng_free(c.rng);
    gsl_rng_free(c.rng_later);
    return st;
}
