/* SPDX-License-Identifier: MIT
 * libFuzzer target for the transfer-curve fitter: the bytes read as pairs of
 * doubles (vg_V, r_ohm), 0 to 512 points, any bit patterns (NaN, infinities,
 * subnormals), fitted with one reused workspace as ingest does. The first
 * byte picks the search method. Not a test of fit quality.
 */
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/fit.h"
#include "splitlot/physics.h"

#define MAX_POINTS 512
/* 90 nm SiO2: 3.9 eps0 / 90 nm, about 3.84e-4 F/m^2 */
#define GATE_F_PER_M2 3.836e-4

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
    static double vg[MAX_POINTS], r[MAX_POINTS];
    if (size < 1)
        return 0;
    sl_fit_config cfg;
    sl_fit_config_default(&cfg, GATE_F_PER_M2, 20.0, 10.0);
    cfg.method = (data[0] & 1) ? SL_FIT_METHOD_FULL : SL_FIT_METHOD_PROJECTED;
    size_t n = (size - 1) / (2 * sizeof(double));
    if (n > MAX_POINTS)
        n = MAX_POINTS;
    for (size_t i = 0; i < n; i++) {
        memcpy(&vg[i], data + 1 + 16 * i, sizeof(double));
        memcpy(&r[i], data + 1 + 16 * i + 8, sizeof(double));
    }
    sl_fit_result res;
    if (sl_fit_sweep(&res, workspace, &cfg, vg, r, n) == SL_OK && res.cls == SL_FIT_OK)
        (void)sl_fit_model_ohm(&res.p, &cfg, vg[0]);
    return 0;
}
