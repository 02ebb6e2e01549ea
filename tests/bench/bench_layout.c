/* SPDX-License-Identifier: MIT
 * Benchmark (not a test): `layout` of a 200-split plan at 4 temperatures
 * (parse, wafer and load assignment, power per level with the wafers per
 * split each level needs), without and with a batched step; and the
 * Monte-Carlo power check of the demo plan, 10000 lots on 2 threads.
 * Prints figures only (median of 5 runs; wall-clock time, and CPU time of the
 * threaded simulation, which a loaded machine does not inflate).
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "splitlot/layout.h"
#include "splitlot/physics.h"
#include "splitlot/plan.h"

#define RUNS 5

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static double cpu_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int by_value(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* 4 dielectrics x 10 levels x 5 levels = 200 splits, 2 wafers each. */
static size_t big_plan(char *buf, size_t size, int batched)
{
    size_t n = (size_t)snprintf(buf, size,
        "lot: BENCH-200\ntemperatures_K: [300, 200, 77, 4]\n"
        "dielectrics:\n"
        "  - { name: d1, layers: [ { material: SiO2, thickness_nm: 90 } ], doping_per_cm2: { mean: 0, sigma: 2e11 } }\n"
        "  - { name: d2, layers: [ { material: SiO2, thickness_nm: 60 } ], doping_per_cm2: { mean: 0, sigma: 2e11 } }\n"
        "  - { name: d3, layers: [ { material: Al2O3, thickness_nm: 20 } ], doping_per_cm2: { mean: 0, sigma: 2e11 } }\n"
        "  - { name: d4, layers: [ { material: HfO2, thickness_nm: 10 } ], doping_per_cm2: { mean: 0, sigma: 2e11 } }\n"
        "treatments:\n");
    for (int i = 1; i <= 9; i++)
        n += (size_t)snprintf(buf + n, size - n,
                              "  - { name: a%d, doping_per_cm2: { mean: %de11, sigma: 2e11 } }\n", i, i);
    for (int i = 1; i <= 4; i++)
        n += (size_t)snprintf(buf + n, size - n,
                              "  - { name: b%d, doping_per_cm2: { mean: -%de11, sigma: 2e11 } }\n", i, i);
    n += (size_t)snprintf(buf + n, size - n,
        "design:\n  kind: full-factorial\n  factors:\n    dielectric: [d1, d2, d3, d4]\n"
        "    a: [none, a1, a2, a3, a4, a5, a6, a7, a8, a9]\n    b: [none, b1, b2, b3, b4]\n"
        "  wafers_per_split: 2\nwafers: 400\ndevices_per_wafer: 36\nexpected_yield: 0.85\n"
        "seed: 9\nvariation: { wafer_sigma_per_cm2: 1.0e11, device_sigma_V: 0.5%s }\n"
        "resolve: { shift_per_cm2: 3.0e11 }\n%s",
        batched ? ", batch_sigma_per_cm2: 1.0e11" : "",
        batched ? "batches: [ { step: b1, capacity: 25 } ]\n" : "");
    return n;
}

static void bench_big_layout(int batched)
{
    static char text[16384];
    size_t len = big_plan(text, sizeof text, batched);
    double t[RUNS];
    size_t levels = 0;
    for (int r = 0; r < RUNS; r++) {
        sl_diag *diag = sl_diag_new();
        sl_plan *plan = NULL;
        sl_layout *layout = NULL;
        double t0 = now_s();
        if (sl_plan_parse(&plan, text, len, "bench.yaml", diag) != SL_OK ||
            sl_layout_build(&layout, plan, diag) != SL_OK) {
            fprintf(stderr, "bench: %s\n", sl_diag_last(diag));
            exit(1);
        }
        t[r] = now_s() - t0;
        levels = layout->n_levels;
        sl_layout_free(layout);
        sl_plan_free(plan);
        sl_diag_free(diag);
    }
    qsort(t, RUNS, sizeof t[0], by_value);
    printf("layout, 200 splits x 4 temperatures, %zu levels%s: %.1f ms (median of %d)\n", levels,
           batched ? ", one batched step" : "", 1e3 * t[RUNS / 2], RUNS);
}

static void bench_simulate(const char *demo, size_t lots)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_layout *layout = NULL;
    if (sl_plan_load(&plan, demo, diag) != SL_OK || sl_layout_build(&layout, plan, diag) != SL_OK) {
        fprintf(stderr, "bench: %s\n", sl_diag_last(diag));
        exit(1);
    }
    double t[RUNS], cpu[RUNS];
    for (int r = 0; r < RUNS; r++) {
        sl_layout_mc mc;
        double t0 = now_s(), c0 = cpu_s();
        if (sl_layout_simulate_power(&mc, plan, layout, lots, 1, 2) != SL_OK)
            exit(1);
        t[r] = now_s() - t0;
        cpu[r] = cpu_s() - c0;
        sl_layout_mc_free(&mc);
    }
    qsort(t, RUNS, sizeof t[0], by_value);
    qsort(cpu, RUNS, sizeof cpu[0], by_value);
    printf("layout --simulate %zu on %s, 2 threads: %.2f s wall, %.2f s CPU (medians of %d)\n",
           lots, demo, t[RUNS / 2], cpu[RUNS / 2], RUNS);
    sl_layout_free(layout);
    sl_plan_free(plan);
    sl_diag_free(diag);
}

int main(int argc, char **argv)
{
    sl_physics_init();
    bench_big_layout(0);
    bench_big_layout(1);
    bench_simulate(argc > 1 ? argv[1] : "plans/demo.yaml", 10000);
    return 0;
}
