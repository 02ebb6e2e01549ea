/* SPDX-License-Identifier: MIT
 * libFuzzer target for the double-sweep splitter and branch fits: the bytes
 * after the first read as points of 17 bytes (vg_V and r_ohm as any double
 * bit patterns, then a direction byte taken as +1, -1 or 0); the first byte
 * picks whether the direction is given or the turn of the gate found. Not a
 * test of fit quality.
 */
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "splitlot/fit.h"
#include "splitlot/physics.h"

#define MAX_POINTS 512
/* 20 nm Al2O3: 9.0 eps0 / 20 nm, about 3.98e-3 F/m^2 */
#define GATE_F_PER_M2 3.984e-3

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static sl_fit_workspace *workspace;

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
    (void)argc;
    (void)argv;
    sl_physics_init();
    workspace = sl_fit_workspace_new(MAX_POINTS);
    return workspace ? 0 : -1;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    static double vg[MAX_POINTS], r[MAX_POINTS];
    static signed char dir[MAX_POINTS];
    size_t n = (size - 1) / 17;
    n = n > MAX_POINTS ? MAX_POINTS : n;
    for (size_t i = 0; i < n; i++) {
        const uint8_t *p = data + 1 + 17 * i;
        memcpy(&vg[i], p, sizeof(double));
        memcpy(&r[i], p + 8, sizeof(double));
        dir[i] = (signed char)(p[16] % 3 == 0 ? 0 : p[16] % 3 == 1 ? 1 : -1);
    }
    size_t turn = sl_fit_sweep_turn(vg, n);
    if (turn >= n && n > 0)
        __builtin_trap(); /* the turn is a point of the sweep, or 0 */
    sl_fit_config cfg;
    sl_fit_config_default(&cfg, GATE_F_PER_M2, 20.0, 10.0);
    sl_fit_double_result d;
    sl_status st = sl_fit_double_sweep(&d, workspace, &cfg, vg, r, data[0] & 1 ? dir : NULL, n);
    if (st == SL_OK && d.device.cls == SL_FIT_OK && !isfinite(d.device.p.cnp_V))
        __builtin_trap(); /* an ok device always has a neutrality point */
    return 0;
}
