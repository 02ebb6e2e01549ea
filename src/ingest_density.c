/* SPDX-License-Identifier: MIT
 * Fit configurations of an import per gate stack and temperature: each
 * carries a density table (include/splitlot/physics.h) made once, the first
 * time a device of that stack at that temperature is met, on the reading
 * thread; the fitting threads only read them.
 */
#include <math.h>
#include <stdlib.h>

#include "ingest_internal.h"
#include "splitlot/predict.h"

struct ingest_density {
    double cg, temperature_K;
    sl_fit_config fit;                /* the wafer's, with the table */
    sl_physics_density_table *table;
    ingest_density *next;
};

void sl__ingest_density_free(ingest_density *list)
{
    while (list) {
        ingest_density *next = list->next;
        sl_physics_density_table_free(list->table);
        free(list);
        list = next;
    }
}

/* Largest gate offset the table covers: eight times the dielectric's gate
 * range, so that V_g - V_cnp of a sweep stays inside while the search
 * moves V_cnp; beyond it the balance is solved point by point. */
static double table_reach_V(const ingest_ctx *c, size_t wafer_index)
{
    const sl_plan *plan = c->plan;
    size_t dielectric = plan->splits[c->wafers[wafer_index].split].dielectric;
    double lo = 0.0, hi = 0.0;
    int from_plan = 0;
    sl_predict_gate_range(&lo, &hi, &from_plan, plan, dielectric);
    double reach = 8.0 * fmax(fabs(lo), fabs(hi));
    return isfinite(reach) && reach > 20.0 ? reach : 20.0;
}

const sl_fit_config *sl__ingest_fit_for(ingest_ctx *c, size_t wafer_index, double temperature_K,
                                    sl_status *status)
{
    const sl_fit_config *base = &c->wafers[wafer_index].fit;
    *status = SL_OK;
    if (c->opt->density_model == SL_FIT_DENSITY_SHORT)
        return base;
    double t = isfinite(temperature_K) && temperature_K > 0.0 ? temperature_K
               : c->plan->n_temperatures > 0                  ? c->plan->temperatures_K[0]
                                                              : 300.0;
    double cg = base->gate_capacitance_F_per_m2;
    for (ingest_density *d = c->densities; d; d = d->next)
        if (d->cg == cg && d->temperature_K == t && d->fit.model == base->model)
            return &d->fit;
    ingest_density *d = calloc(1, sizeof *d);
    if (!d) {
        *status = SL_ENOMEM;
        return NULL;
    }
    *status = sl_physics_density_table_new(&d->table, cg, t, c->plan->fermi_velocity_m_s,
                                           table_reach_V(c, wafer_index));
    if (*status != SL_OK) {
        sl_diag_error(c->diag, "no carrier-density table for C_g %g F/m^2 at %g K",
                      cg, t);
        free(d);
        return NULL;
    }
    d->cg = cg;
    d->temperature_K = t;
    d->fit = *base;
    d->fit.density_table = d->table;
    d->next = c->densities;
    c->densities = d;
    return &d->fit;
}
