/* SPDX-License-Identifier: MIT
 * Benchmark of the sweep path on one core: CSV rows per second (parse plus
 * conversion of the four numeric columns of a transfer-sweep file) and
 * transfer-curve fits per second for 201-point sweeps. Prints figures only;
 * never run by ctest.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "splitlot/csv.h"
#include "splitlot/fit.h"
#include "splitlot/physics.h"
#include "splitlot/units.h"

#define CSV_ROWS 4000000
#define CSV_PASSES 3
#define SWEEP_POINTS 201
#define N_SWEEPS 4000
#define FIT_ROUNDS 5

/* CPU seconds of this process: the figure per core, less disturbed than
 * wall time on a shared machine. */
static double seconds_now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* An invented sweep file in memory: 12 wafers, devices of 201 points. */
static char *make_sweep_csv(size_t *len)
{
    size_t cap = (size_t)CSV_ROWS * 48 + 64, n = 0;
    char *buf = malloc(cap);
    if (!buf)
        return NULL;
    n += (size_t)sprintf(buf, "wafer,device,die_x,die_y,vg_V,r_ohm\n");
    for (long i = 0; i < CSV_ROWS; i++) {
        long device = i / SWEEP_POINTS, point = i % SWEEP_POINTS;
        double vg_V = -40.0 + 0.4 * (double)point;
        double r_ohm = 800.0 + 9000.0 / sqrt(0.04 + (vg_V - 3.0) * (vg_V - 3.0) / 100.0);
        n += (size_t)sprintf(buf + n, "W%02ld,D%04ld,%ld,%ld,%.1f,%.2f\n", 1 + device % 12,
                             device % 10000, device % 50 - 25, device / 50 % 50 - 25, vg_V,
                             r_ohm);
    }
    *len = n;
    return buf;
}

/* One timed read of the sweep text: every row, the four numbers converted
 * and the two ids measured. Returns the rows read, or -1 on an error. */
static long csv_pass(double *cpu_s, double *checksum, size_t *id_bytes, char *text, size_t len)
{
    FILE *f = fmemopen(text, len, "rb");
    sl_diag *diag = sl_diag_new();
    sl_csv *csv = NULL;
    long rows = -1;
    double t0 = seconds_now();
    if (f && diag && sl_csv_open_stream(&csv, f, "bench", diag) == SL_OK) {
        static const char *const numeric[4] = { "die_x", "die_y", "vg_V", "r_ohm" };
        size_t cols[4];
        for (size_t j = 0; j < 4; j++)
            cols[j] = (size_t)sl_csv_column(csv, numeric[j]);
        size_t wafer = (size_t)sl_csv_column(csv, "wafer");
        size_t device = (size_t)sl_csv_column(csv, "device");
        bool has, ok = true;
        double sum = 0.0;
        size_t bytes = 0;
        for (rows = 0; ok && sl_csv_next(&has, csv, diag) == SL_OK && has; rows++) {
            for (size_t j = 0; ok && j < 4; j++) {
                double v = 0.0;
                ok = sl_csv_number(&v, csv, cols[j], diag) == SL_OK;
                sum += v;
            }
            size_t a, b;
            sl_csv_field(csv, wafer, &a);
            sl_csv_field(csv, device, &b);
            bytes += a + b;
        }
        rows = ok && sl_diag_size(diag) == 0 ? rows : -1;
        *checksum = sum;
        *id_bytes = bytes;
    }
    *cpu_s = seconds_now() - t0;
    sl_csv_free(csv);
    sl_diag_free(diag);
    if (f)
        fclose(f);
    return rows;
}

static int compare_doubles(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* CSV_PASSES reads of the same text; the median CPU time is reported, as the
 * machine is shared and single readings are noisy. */
static int bench_csv(void)
{
    size_t len;
    char *text = make_sweep_csv(&len);
    if (!text)
        return 1;
    double cpu_s[CSV_PASSES], checksum = 0.0;
    size_t id_bytes = 0;
    long rows = 0;
    for (int k = 0; k < CSV_PASSES && rows >= 0; k++)
        rows = csv_pass(&cpu_s[k], &checksum, &id_bytes, text, len);
    free(text);
    if (rows != CSV_ROWS)
        return 1;
    qsort(cpu_s, CSV_PASSES, sizeof cpu_s[0], compare_doubles);
    double dt = cpu_s[CSV_PASSES / 2];
    printf("csv: %ld rows, %.1f MB in %.3f CPU s (median of %d): %.2f million rows/s, %.0f MB/s "
           "(checksum %.6g, %zu id bytes)\n",
           rows, (double)len / 1e6, dt, CSV_PASSES, (double)rows / dt / 1e6, (double)len / dt / 1e6,
           checksum, id_bytes);
    return 0;
}

/* The test population of tests/test_fit.c: 90 nm SiO2, L/W = 2, 0.5 % noise. */
static double *make_sweeps(const sl_fit_config *cfg, double *vg)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 2026);
    double *r = malloc(sizeof(double) * SWEEP_POINTS * N_SWEEPS);
    for (size_t i = 0; i < SWEEP_POINTS; i++)
        vg[i] = -40.0 + 0.4 * (double)i;
    for (size_t k = 0; r && k < N_SWEEPS; k++) {
        sl_fit_params p = { gsl_ran_flat(rng, -20, 30), gsl_ran_flat(rng, 500, 5000),
                            exp(gsl_ran_flat(rng, log(5e10), log(5e11))),
                            gsl_ran_flat(rng, 100, 2000) };
        for (size_t i = 0; i < SWEEP_POINTS; i++)
            r[k * SWEEP_POINTS + i] =
                sl_fit_model_ohm(&p, cfg, vg[i]) * (1.0 + gsl_ran_gaussian(rng, 0.005));
    }
    gsl_rng_free(rng);
    return r;
}

static void bench_method(const sl_fit_config *cfg, const double *vg, const double *r,
                         const char *label)
{
    sl_fit_workspace *ws = sl_fit_workspace_new(SWEEP_POINTS);
    long ok = 0, iterations = 0;
    double t0 = seconds_now();
    for (int round = 0; round < FIT_ROUNDS; round++) {
        for (size_t k = 0; k < N_SWEEPS; k++) {
            sl_fit_result res;
            sl_fit_sweep(&res, ws, cfg, vg, r + k * SWEEP_POINTS, SWEEP_POINTS);
            ok += res.cls == SL_FIT_OK;
            iterations += res.iterations;
        }
    }
    double dt = seconds_now() - t0, fits = (double)FIT_ROUNDS * N_SWEEPS;
    printf("fit %s: %.0f sweeps of %d points in %.3f CPU s: %.0f fits/s, %.1f us/fit, "
           "%.2f iterations/fit, %.1f %% ok; a lot of 12500 devices: %.2f s on one core\n",
           label, fits, SWEEP_POINTS, dt, fits / dt, 1e6 * dt / fits, (double)iterations / fits,
           100.0 * (double)ok / fits, 12500.0 * dt / fits);
    sl_fit_workspace_free(ws);
}

static int bench_fits(void)
{
    sl_fit_config cfg;
    sl_fit_config_default(&cfg, 3.9 * SL_SI_EPS0 / 90e-9, 20.0, 10.0);
    double vg[SWEEP_POINTS];
    double *r = make_sweeps(&cfg, vg);
    if (!r)
        return 1;
    bench_method(&cfg, vg, r, "projected");
    cfg.method = SL_FIT_METHOD_FULL;
    bench_method(&cfg, vg, r, "full");
    cfg.method = SL_FIT_METHOD_PROJECTED;
    cfg.model = SL_FIT_MODEL_TWO_MOBILITY;
    bench_method(&cfg, vg, r, "two-mobility");
    free(r);
    return 0;
}

int main(void)
{
    sl_physics_init();
    int rc = bench_csv();
    return bench_fits() || rc;
}
