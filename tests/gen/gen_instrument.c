/* SPDX-License-Identifier: MIT
 * Writes the instrument-file fixtures of tests/data/instrument with their
 * known truth: the shapes testers, probers and source-meters write (drain
 * current at a drain bias with units in the header, semicolons and decimal
 * commas, double sweeps with hysteresis, a direction column, prober
 * coordinates from 1 or centred, four device types per die). Invented data,
 * drawn from the transfer-curve model (include/splitlot/fit.h) with a fixed
 * seed, so the files are the same on every run.
 * Usage: gen_instrument DATA_DIR OUT_DIR (plans read from DATA_DIR).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "splitlot/fit.h"
#include "splitlot/physics.h"
#include "splitlot/plan.h"
#include "splitlot/predict.h"

#define NOISE_REL 0.002   /* 0.2 % of the reading, a quiet meter */
#define MAX_PATH 4096

typedef struct {
    const sl_plan *plan;
    gsl_rng *rng;
    sl_fit_config cfg;
    FILE *out, *truth;
    char sep;
    int decimal_comma;
} gen;

/* A number as the file writes it: %.*g, with a decimal comma if asked. */
static void put_number(const gen *g, double v, int digits)
{
    char text[64];
    snprintf(text, sizeof text, "%.*g", digits, v);
    if (g->decimal_comma)
        for (char *p = text; *p; p++)
            if (*p == '.')
                *p = ',';
    fputs(text, g->out);
}

static void sep(const gen *g) { fputc(g->sep, g->out); }

/* A device's drawn truth. */
typedef struct {
    sl_fit_params p;
    double hysteresis_V;
    double length_um, width_um;
} device_truth;

static void draw(gen *g, device_truth *d, double cnp_lo, double cnp_hi)
{
    d->p.cnp_V = gsl_ran_flat(g->rng, cnp_lo, cnp_hi);
    d->p.mobility_cm2_per_Vs = gsl_ran_flat(g->rng, 1500.0, 2500.0);
    d->p.n0_per_cm2 = gsl_ran_flat(g->rng, 1.5e11, 4.0e11);
    d->p.r_contact_ohm = gsl_ran_flat(g->rng, 150.0, 400.0);
    d->hysteresis_V = 0.0;
}

static double reading(gen *g, const device_truth *d, double cnp_V, double vg)
{
    sl_fit_config cfg = g->cfg;
    cfg.length_over_width = d->length_um / d->width_um;
    sl_fit_params p = d->p;
    p.cnp_V = cnp_V;
    double r = sl_fit_model_ohm(&p, &cfg, vg);
    return r * (1.0 + gsl_ran_gaussian(g->rng, NOISE_REL));
}

static void write_truth_header(FILE *f)
{
    fputs("wafer,device,die_x,die_y,v_cnp_V,hysteresis_V,mobility_cm2_per_Vs,"
          "channel_length_um,channel_width_um\n", f);
}

static void write_truth(const gen *g, const char *wafer, const char *device, long x, long y,
                        const device_truth *d)
{
    fprintf(g->truth, "%s,%s,%ld,%ld,%.6f,%.6f,%.3f,%g,%g\n", wafer, device, x, y, d->p.cnp_V,
            d->hysteresis_V, d->p.mobility_cm2_per_Vs, d->length_um, d->width_um);
}

static FILE *open_out(const char *dir, const char *name)
{
    char path[MAX_PATH];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *f = fopen(path, "w");
    if (!f)
        fprintf(stderr, "gen_instrument: cannot write %s\n", path);
    return f;
}

static sl_plan *load_plan(const char *data, const char *name, sl_fit_config *cfg)
{
    char path[MAX_PATH];
    snprintf(path, sizeof path, "%s/%s", data, name);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    double cg = 0.0;
    if (sl_plan_load(&plan, path, diag) != SL_OK ||
        sl_predict_gate_capacitance(&cg, NULL, NULL, plan, 0) != SL_OK) {
        fprintf(stderr, "gen_instrument: %s does not load\n", path);
        sl_plan_free(plan);
        plan = NULL;
    }
    sl_diag_free(diag);
    if (plan)
        sl_fit_config_default(cfg, cg, plan->channel_length_um, plan->channel_width_um);
    return plan;
}

/* ---- drain current at a drain bias, semicolons, decimal commas, units ---- */

static void idvd_point(gen *g, const char *w, const char *dev, long x, long y, double vg,
                       const char *id_text, double id_uA, int compliance)
{
    fprintf(g->out, "%s;%s;%ld;%ld;", w, dev, x, y);
    put_number(g, vg, 6);
    sep(g);
    if (id_text)
        fputs(id_text, g->out);
    else
        put_number(g, id_uA, 7);
    fprintf(g->out, ";50;%d;op-7\n", compliance);
}

/* Device 0 of each wafer has one overflow reading; device 1 two points at
 * compliance (their current is nonsense, as a meter at its limit gives). */
static void idvd_file(gen *g)
{
    fputs("# parametric tester export, invented for the tests\n", g->out);
    fputs("Wafer;Device;Die_X;Die_Y;Vg [V];Id (uA);Vd [mV];Compliance;Operator\n", g->out);
    const double vd_V = 0.05;
    for (size_t w = 0; w < g->plan->n_wafers; w++)
        for (long k = 0; k < g->plan->devices_per_wafer; k++) {
            char dev[32];
            long x = 1 + k % 3, y = 1 + k / 3;
            snprintf(dev, sizeof dev, "T%02ld", k + 1);
            device_truth d = { .length_um = 20, .width_um = 10 };
            draw(g, &d, -2.5, 2.5);
            write_truth(g, g->plan->wafers[w], dev, x, y, &d);
            for (int i = 0; i <= 140; i++) {
                double vg = -7.0 + 0.1 * i;
                double id_uA = vd_V / reading(g, &d, d.p.cnp_V, vg) * 1e6;
                if (k == 0 && i == 40)
                    idvd_point(g, g->plan->wafers[w], dev, x, y, vg, "9,91E+37", 0, 0);
                else
                    idvd_point(g, g->plan->wafers[w], dev, x, y, vg, NULL, id_uA,
                               k == 1 && (i == 100 || i == 101));
            }
        }
}

/* ---- double sweeps ---- */

static void double_row(gen *g, const char *w, const char *dev, long x, long y, double vg, double r,
                       const char *direction)
{
    fprintf(g->out, "%s%c%s%c%ld%c%ld%c", w, g->sep, dev, g->sep, x, g->sep, y, g->sep);
    put_number(g, vg, 6);
    sep(g);
    if (direction) {
        put_number(g, r, 7);
        fprintf(g->out, "%c%s\n", g->sep, direction);
    } else {
        put_number(g, r / 1000.0, 7); /* kOhm */
        fputc('\n', g->out);
    }
}

/* Forward -7 -> 7 V, then reverse 7 -> -7 V, the neutrality point moved by
 * the hysteresis between them. With a direction column the reverse branch
 * comes first in the file, so only the column tells them apart. */
static void double_file(gen *g, int with_direction)
{
    if (with_direction)
        fputs("wafer,device,die_x,die_y,vg_V,r_ohm,direction\n", g->out);
    else
        fputs("wafer\tdevice\tdie_x\tdie_y\tVg [V]\tR [kOhm]\n", g->out);
    for (size_t w = 0; w < g->plan->n_wafers; w++)
        for (long k = 0; k < g->plan->devices_per_wafer; k++) {
            char dev[32];
            long x = 1 + k % 3, y = 1 + k / 3;
            snprintf(dev, sizeof dev, "H%02ld", k + 1);
            device_truth d = { .length_um = 20, .width_um = 10 };
            draw(g, &d, -2.0, 2.0);
            d.hysteresis_V = gsl_ran_flat(g->rng, 0.05, 2.0);
            write_truth(g, g->plan->wafers[w], dev, x, y, &d);
            double fwd = d.p.cnp_V - d.hysteresis_V / 2, rev = d.p.cnp_V + d.hysteresis_V / 2;
            for (int pass = 0; pass < 2; pass++) {
                int reverse = with_direction ? pass == 0 : pass == 1;
                for (int i = 0; i <= 140; i++) {
                    double vg = reverse ? 7.0 - 0.1 * i : -7.0 + 0.1 * i;
                    double r = reading(g, &d, reverse ? rev : fwd, vg);
                    double_row(g, g->plan->wafers[w], dev, x, y, vg, r,
                               with_direction ? (reverse ? "reverse" : "forward") : NULL);
                }
            }
        }
}

/* ---- centred prober coordinates, a results file ---- */

static void centred_file(gen *g)
{
    fputs("wafer,device,die_x,die_y,v_cnp_V,hysteresis_V,temperature_K\n", g->out);
    for (size_t w = 0; w < g->plan->n_wafers; w++)
        for (long k = 0; k < g->plan->devices_per_wafer; k++) {
            char dev[32];
            long x = g->plan->first_die_x + k % 5, y = g->plan->first_die_y + k / 5;
            snprintf(dev, sizeof dev, "C%02ld", k + 1);
            device_truth d = { .length_um = 20, .width_um = 10 };
            draw(g, &d, -8.0, 8.0);
            d.hysteresis_V = gsl_ran_flat(g->rng, 0.05, 2.0);
            write_truth(g, g->plan->wafers[w], dev, x, y, &d);
            fprintf(g->out, "%s,%s,%ld,%ld,%.4f,%.4f,300\n", g->plan->wafers[w], dev, x, y,
                    d.p.cnp_V, d.hysteresis_V);
        }
}

/* ---- four device types per die ---- */

static void types_file(gen *g, int by_geometry)
{
    static const double widths[] = { 10, 10, 5, 5 }; /* by_geometry only */
    fputs(by_geometry ? "wafer,device,die_x,die_y,channel_length_um,channel_width_um,vg_V,r_ohm\n"
                      : "wafer,device,device_type,die_x,die_y,vg_V,r_ohm\n",
          g->out);
    const sl_plan *p = g->plan;
    for (size_t w = 0; w < p->n_wafers; w++)
        for (long die = 0; die < p->wafer_rows * p->wafer_cols; die++)
            for (size_t t = 0; t < p->n_device_types; t++) {
                const sl_plan_device_type *type = &p->device_types[t];
                long x = die % p->wafer_cols, y = die / p->wafer_cols;
                char dev[96];
                snprintf(dev, sizeof dev, "X%ldY%ld-%s", x, y, type->name);
                device_truth d = { .length_um = type->channel_length_um,
                                   .width_um = by_geometry ? widths[t] : type->channel_width_um };
                draw(g, &d, -10.0, 10.0);
                write_truth(g, p->wafers[w], dev, x, y, &d);
                for (int i = 0; i <= 80; i++) {
                    double vg = -40.0 + 1.0 * i;
                    double r = reading(g, &d, d.p.cnp_V, vg);
                    if (by_geometry)
                        fprintf(g->out, "%s,%s,%ld,%ld,%g,%g,%g,%.7g\n", p->wafers[w], dev, x, y,
                                d.length_um, d.width_um, vg, r);
                    else
                        fprintf(g->out, "%s,%s,%s,%ld,%ld,%g,%.7g\n", p->wafers[w], dev,
                                type->name, x, y, vg, r);
                }
            }
}

/* ---- driver ---- */

typedef enum { SHAPE_IDVD, SHAPE_DOUBLE, SHAPE_DOUBLE_DIR, SHAPE_CENTRED, SHAPE_TYPES,
               SHAPE_GEOMETRY } shape;

typedef struct {
    shape what;
    const char *plan, *file, *truth;
    char sep;
    int decimal_comma;
} fixture;

static const fixture fixtures[] = {
    { SHAPE_IDVD, "alox.yaml", "alox_idvd.csv", "alox_idvd_truth.csv", ';', 1 },
    { SHAPE_DOUBLE, "alox.yaml", "alox_double.csv", "alox_double_truth.csv", '\t', 0 },
    { SHAPE_DOUBLE_DIR, "alox.yaml", "alox_double_dir.csv", "alox_double_dir_truth.csv", ',', 0 },
    { SHAPE_CENTRED, "centred.yaml", "centred_results.csv", "centred_truth.csv", ',', 0 },
    { SHAPE_TYPES, "types.yaml", "types_sweeps.csv", "types_truth.csv", ',', 0 },
    { SHAPE_GEOMETRY, "types.yaml", "types_geometry.csv", "types_geometry_truth.csv", ',', 0 },
};

static int write_fixture(const fixture *fx, const char *data, const char *out_dir,
                         unsigned long seed)
{
    gen g = { .sep = fx->sep, .decimal_comma = fx->decimal_comma };
    sl_plan *plan = load_plan(data, fx->plan, &g.cfg);
    if (!plan)
        return 1;
    g.plan = plan;
    g.rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(g.rng, seed);
    g.out = open_out(out_dir, fx->file);
    g.truth = open_out(out_dir, fx->truth);
    int rc = g.out && g.truth ? 0 : 1;
    if (rc == 0) {
        write_truth_header(g.truth);
        switch (fx->what) {
        case SHAPE_IDVD: idvd_file(&g); break;
        case SHAPE_DOUBLE: double_file(&g, 0); break;
        case SHAPE_DOUBLE_DIR: double_file(&g, 1); break;
        case SHAPE_CENTRED: centred_file(&g); break;
        case SHAPE_TYPES: types_file(&g, 0); break;
        case SHAPE_GEOMETRY: types_file(&g, 1); break;
        }
    }
    if (g.out && fclose(g.out) != 0)
        rc = 1;
    if (g.truth && fclose(g.truth) != 0)
        rc = 1;
    gsl_rng_free(g.rng);
    sl_plan_free(plan);
    return rc;
}

int main(int argc, char **argv)
{
    if (argc != 3) {
        fputs("usage: gen_instrument DATA_DIR OUT_DIR\n", stderr);
        return 2;
    }
    sl_physics_init();
    int rc = 0;
    for (size_t i = 0; i < sizeof fixtures / sizeof fixtures[0]; i++)
        rc |= write_fixture(&fixtures[i], argv[1], argv[2], 1500 + (unsigned long)i);
    return rc;
}
