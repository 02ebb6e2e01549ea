/* SPDX-License-Identifier: MIT
 * libFuzzer target for the plan reader: arbitrary bytes through the YAML
 * parser and validator, then the layout and the accessors every later step
 * relies on, with every collected message formatted. Not a test of meaning.
 */
#include <stddef.h>
#include <stdint.h>

#include "splitlot/layout.h"
#include "splitlot/physics.h"
#include "splitlot/plan.h"

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerInitialize(int *argc, char ***argv)
{
    (void)argc;
    (void)argv;
    sl_physics_init();
    return 0;
}

/* Touch what a valid plan promises: stacks resolve, splits and wafers index. */
static void use_plan(const sl_plan *plan, sl_diag *diag)
{
    sl_layer layers[16];
    size_t count;
    char hash[17];
    for (size_t i = 0; i < plan->n_dielectrics; i++)
        (void)sl_plan_stack(plan, i, layers, 16, &count);
    for (size_t i = 0; i < plan->n_splits; i++) {
        (void)sl_plan_split_doping_per_cm2(plan, i);
        (void)sl_plan_split_index(plan, plan->splits[i].name);
    }
    for (size_t i = 0; i < plan->n_wafers; i++)
        (void)sl_plan_wafer_index(plan, plan->wafers[i]);
    sl_plan_hash_hex(plan, hash);
    sl_layout *layout = NULL;
    if (sl_layout_build(&layout, plan, diag) == SL_OK)
        sl_layout_free(layout);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    if (sl_plan_parse(&plan, (const char *)data, size, "fuzz.yaml", diag) == SL_OK)
        use_plan(plan, diag);
    char line[4096];
    for (size_t i = 0; i < sl_diag_size(diag); i++)
        sl_diag_format(sl_diag_get(diag, i), line, sizeof line);
    sl_plan_free(plan);
    sl_diag_free(diag);
    return 0;
}
