/* SPDX-License-Identifier: MIT
 * Benchmark (not a test): electron-density evaluations per second and
 * charge-balance solves per second on one core. Prints figures only.
 */
#include <stdio.h>
#include <time.h>

#include "splitlot/physics.h"

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void bench_density(void)
{
    const long n = 20000000;
    volatile double sink = 0.0;
    double t0 = now_s();
    for (long i = 0; i < n; i++) {
        /* Fermi levels from -0.5 to +0.5 eV at 300 K */
        double mu = (-0.5 + (double)(i % 10001) * 1e-4) * SL_SI_ELEMENTARY_CHARGE;
        sink += sl_physics_electron_density_per_m2(mu, 300.0, SL_SI_DEFAULT_FERMI_VELOCITY);
    }
    double dt = now_s() - t0;
    printf("density evaluations:   %10.3g per second (%ld in %.3f s)\n", (double)n / dt, n, dt);
    (void)sink;
}

static void bench_solve(void)
{
    const long n = 2000000;
    const double cg = 3.83681472e-4; /* 90 nm SiO2, F/m^2 */
    volatile double sink = 0.0;
    double t0 = now_s();
    for (long i = 0; i < n; i++) {
        double vg = -40.0 + (double)(i % 8001) * 0.01, mu;
        if (sl_physics_solve_fermi_J(&mu, vg, 2.0, cg, 300.0, SL_SI_DEFAULT_FERMI_VELOCITY) == SL_OK)
            sink += mu;
    }
    double dt = now_s() - t0;
    printf("charge-balance solves: %10.3g per second (%ld in %.3f s)\n", (double)n / dt, n, dt);
    (void)sink;
}

int main(void)
{
    sl_physics_init();
    bench_density();
    bench_solve();
    return 0;
}
