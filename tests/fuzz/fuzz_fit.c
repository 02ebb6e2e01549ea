/* SPDX-License-Identifier: MIT
 * libFuzzer target for the transfer-curve fitter: the bytes read as pairs of
 * doubles (vg_V, r_ohm), 0 to 512 points, any bit patterns (NaN, infinities,
 * subnormals), fitted with one reused workspace as ingest does. The first
 * byte picks the search method and, with bit 1 set, a curve mode: the model
 * curve from four parameter bytes with a noise byte and a gate-step byte per
 * point, so the search itself is fuzzed. Not a test of fit quality.
 */
#include <math.h>
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

/* Raw mode: the bytes are the doubles (vg_V, r_ohm) of each point. */
static size_t raw_points(double *vg, double *r, const uint8_t *data, size_t size)
{
    size_t n = size / (2 * sizeof(double));
    n = n > MAX_POINTS ? MAX_POINTS : n;
    for (size_t i = 0; i < n; i++) {
        memcpy(&vg[i], data + 16 * i, sizeof(double));
        memcpy(&r[i], data + 16 * i + 8, sizeof(double));
    }
    return n;
}

/* Curve mode: parameters from 4 bytes (V_cnp -40..40 V, mobility 10..2.5e4,
 * n0 1e9..1e13 cm^-2, R_c 0..2550 ohm), then per point a gate step and a
 * relative noise of up to +/-10 %. */
static size_t curve_points(double *vg, double *r, const uint8_t *data, size_t size,
                           const sl_fit_config *cfg)
{
    if (size < 4)
        return 0;
    sl_fit_params p = { -40.0 + 80.0 * data[0] / 255.0, 10.0 * pow(2500.0, data[1] / 255.0),
                        1e9 * pow(1e4, data[2] / 255.0), 10.0 * data[3] };
    size_t n = (size - 4) / 2;
    n = n > MAX_POINTS ? MAX_POINTS : n;
    double v = -50.0;
    for (size_t i = 0; i < n; i++) {
        const uint8_t *b = data + 4 + 2 * i;
        v += (b[0] - 64) / 64.0;   /* mostly rising, sometimes back */
        vg[i] = v;
        r[i] = sl_fit_model_ohm(&p, cfg, v) * (1.0 + (b[1] - 128) / 1280.0);
    }
    return n;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static double vg[MAX_POINTS], r[MAX_POINTS];
    if (size < 1)
        return 0;
    sl_fit_config cfg;
    sl_fit_config_default(&cfg, GATE_F_PER_M2, 20.0, 10.0);
    cfg.method = (data[0] & 1) ? SL_FIT_METHOD_FULL : SL_FIT_METHOD_PROJECTED;
    size_t n = (data[0] & 2) ? curve_points(vg, r, data + 1, size - 1, &cfg)
                             : raw_points(vg, r, data + 1, size - 1);
    sl_fit_result res;
    if (sl_fit_sweep(&res, workspace, &cfg, vg, r, n) == SL_OK && res.cls == SL_FIT_OK)
        (void)sl_fit_model_ohm(&res.p, &cfg, vg[0]);
    return 0;
}
