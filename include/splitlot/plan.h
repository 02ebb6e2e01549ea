/* SPDX-License-Identifier: MIT
 * The lot plan: the YAML file of docs/formats.md parsed (libyaml) into
 * plain structs, validated with every problem reported at file:line:col, and
 * normalised so both design kinds look alike to the rest of the library:
 * factor 0 is always "dielectric", every split names its level per factor.
 * Not for: randomisation (layout.h) or physics predictions (predict.h).
 */
#ifndef SPLITLOT_PLAN_H
#define SPLITLOT_PLAN_H

#include <stddef.h>
#include <stdint.h>

#include "splitlot/error.h"
#include "splitlot/physics.h"
#include "splitlot/units.h"

typedef enum {
    SL_DESIGN_FULL_FACTORIAL = 0,
    SL_DESIGN_EXPLICIT,
    SL_DESIGN_FRACTIONAL_FACTORIAL /* 2^(k-p): the splits of the generators' fraction */
} sl_design_kind;

/* A material: built-in (physics.h table) or added/overridden by the plan. */
typedef struct {
    char *name;
    double relative_permittivity;
    double breakdown_MV_per_cm;
} sl_plan_material;

typedef struct {
    char *material;          /* name, resolvable with sl_plan_material_find */
    double thickness_nm;     /* > 0 */
    double sigma_nm;         /* >= 0, default 0 */
} sl_plan_layer;

typedef struct {
    char *name;
    sl_plan_layer *layers;   /* top (channel side) first */
    size_t n_layers;
    sl_est doping_per_cm2;   /* default {0, 0} */
    double doping_tolerance_per_cm2; /* `tolerance`; NaN when not given */
    int has_gate_range;      /* gate_range_V given in the plan */
    double gate_range_V[2];  /* [min, max] when given */
    int has_mobility;        /* mobility_cm2_per_Vs given in the plan */
    sl_est mobility_cm2_per_Vs; /* expected mobility of its devices: mean > 0, sigma >= 0 */
} sl_plan_dielectric;

typedef struct {
    char *name;
    sl_est doping_per_cm2;
    double doping_tolerance_per_cm2; /* `tolerance`; NaN when not given */
} sl_plan_treatment;

/* A transistor of the die (plan key device_types): its channel. */
typedef struct {
    char *name;
    double channel_length_um, channel_width_um;
} sl_plan_device_type;

/* A factor and its levels. Factor 0 is "dielectric" with dielectric names as
 * levels; other factors' levels are treatment names or "none". For an explicit
 * design every treatment used becomes a two-level factor named after it:
 * levels "none" and the treatment. Level 0 is the reference level. */
typedef struct {
    char *name;
    char **levels;
    size_t n_levels;
    /* per level: index into plan->treatments, or -1 for "none"; for factor 0
     * the index into plan->dielectrics */
    long *level_ref;
} sl_plan_factor;

typedef struct {
    char *name;              /* full-factorial: dielectric then "+treatment" per
                                non-none level, e.g. "ox90+anneal-350" */
    size_t dielectric;       /* index into plan->dielectrics */
    size_t *treatments;      /* indices into plan->treatments */
    size_t n_treatments;
    size_t *levels;          /* level index per factor, n_factors entries */
    char **wafers;           /* explicit design: the wafers given; else NULL */
    size_t n_wafers;
} sl_plan_split;

/* What the lot must resolve: a level that misses its plan by its tolerance
 * plus shift is to be judged off-plan with probability power at level alpha.
 * The shift is given per cm^2 (shift_per_cm2 > 0), or in volts per split
 * (shift_V > 0, converted with each split's planned gate capacitance); the
 * other one is 0. device_sigma_V is the older way to give the device scatter
 * (0 when absent); the variation block supersedes it. */
typedef struct {
    int present;
    double shift_per_cm2, shift_V, device_sigma_V, alpha, power;
} sl_plan_resolve;

/* The scatter the power calculation and the analysis assume: wafer to wafer
 * within a split (cm^-2), device to device within a wafer (volts of neutrality
 * point), load to load of a batched step (cm^-2, 0 without batches). */
typedef struct {
    int present;
    double wafer_sigma_per_cm2, device_sigma_V, batch_sigma_per_cm2;
} sl_plan_variation;

/* A process step done in loads of at most capacity wafers: a treatment (or a
 * dielectric's deposition) named by step. */
typedef struct {
    char *step;
    int is_dielectric;       /* step names a dielectric, else a treatment */
    size_t ref;              /* index into plan->dielectrics or plan->treatments */
    long capacity;           /* >= 1 */
} sl_plan_batch;

/* Fractional factorial: factor `factor` takes the level whose +/-1 code
 * (level 0 = -1, level 1 = +1) is the product of the codes of the factors in
 * `of` (all two-level, none itself generated). */
typedef struct {
    size_t factor;
    size_t *of;
    size_t n_of;
} sl_plan_generator;

typedef struct sl_plan {
    char *path;              /* as given to sl_plan_load, for messages */
    char *text;              /* the raw YAML text (stored with predictions) */
    size_t text_len;
    char *lot;
    char *title;             /* "" when absent */
    char *processed;         /* process date YYYY-MM-DD, NULL when absent */
    double fermi_velocity_m_s;        /* default 1.0e6 */
    double disorder_density_per_cm2;  /* default 0 (none given) */
    double *temperatures_K;
    size_t n_temperatures;
    double channel_length_um, channel_width_um;
    long wafer_rows, wafer_cols;
    double expected_yield;            /* (0, 1] */
    sl_est baseline_doping_per_cm2;
    sl_plan_material *materials;      /* built-ins merged with plan additions */
    size_t n_materials;
    sl_plan_dielectric *dielectrics;
    size_t n_dielectrics;
    sl_plan_treatment *treatments;
    size_t n_treatments;
    sl_design_kind design_kind;
    sl_plan_factor *factors;          /* factors[0] is "dielectric" */
    size_t n_factors;
    sl_plan_split *splits;
    size_t n_splits;
    long wafers_per_split;            /* full-factorial; 0 for explicit */
    char **wafers;                    /* W01..Wnn or the list given */
    size_t n_wafers;
    long devices_per_wafer;
    uint64_t seed;
    sl_plan_resolve resolve;
    sl_plan_variation variation;
    sl_plan_batch *batches;
    size_t n_batches;
    sl_plan_generator *generators;    /* fractional-factorial only */
    size_t n_generators;
    double gate_derating;             /* 0.5: safe range from breakdown */
    /* wafer_map.first_die: the prober's coordinates [die_x, die_y] of the
     * first die (default [0, 0], negative allowed); die_x runs over
     * first_die_x .. first_die_x + wafer_cols - 1, die_y likewise */
    long first_die_x, first_die_y;
    long devices_per_die;             /* wafer_map.devices_per_die, default 1 */
    bool devices_per_die_given;       /* the plan says it: ingest holds a die to it */
    sl_plan_device_type *device_types; /* device_types, none when absent */
    size_t n_device_types;
    double max_hysteresis_V;          /* device.max_hysteresis_V; NaN: no limit */
} sl_plan;

/* Device type by name, or -1. */
long sl_plan_device_type_index(const sl_plan *plan, const char *name);

/* Read, parse and validate a plan file ("-" is not accepted). Every problem is
 * added to diag as "path:line:col" errors; warnings (exit 0 in `check`) too.
 * Returns SL_OK (warnings possible), SL_EINPUT when any error was found (*out
 * is then NULL), SL_EIO when the file cannot be read, SL_ENOMEM. */
sl_status sl_plan_load(sl_plan **out, const char *path, sl_diag *diag);

/* The same from text in memory; name is used in messages. */
sl_status sl_plan_parse(sl_plan **out, const char *text, size_t len,
                        const char *name, sl_diag *diag);

void sl_plan_free(sl_plan *plan);

/* Material by name (plan overrides first, then built-ins); NULL if unknown. */
const sl_plan_material *sl_plan_material_find(const sl_plan *plan, const char *name);

/* The SI layers of a dielectric's stack for physics.h, at most max layers.
 * Returns SL_OK or SL_EINPUT (unknown material, too many layers). */
sl_status sl_plan_stack(const sl_plan *plan, size_t dielectric, sl_layer *out,
                        size_t max, size_t *count);

/* Planned net doping of a split: baseline + dielectric + its treatments,
 * sigmas added in quadrature (independent sources), cm^-2. */
sl_est sl_plan_split_doping_per_cm2(const sl_plan *plan, size_t split);

/* Tolerance (cm^-2) of a level's delivered doping against its plan: the
 * `tolerance` of its doping block, else its sigma. factor and level as in
 * plan->factors (level 'none' of a treatment factor: 0). */
double sl_plan_level_tolerance_per_cm2(const sl_plan *plan, size_t factor, size_t level);

/* Index of a split by name, of a wafer id by name; -1 when absent. */
long sl_plan_split_index(const sl_plan *plan, const char *name);
long sl_plan_wafer_index(const sl_plan *plan, const char *wafer);

/* The batch of a step: the batch whose step is that dielectric (is_dielectric
 * 1) or treatment, or NULL when the step is not batched. */
const sl_plan_batch *sl_plan_batch_of(const sl_plan *plan, int is_dielectric, size_t ref);

/* ---- fractional factorials (src/plan_fraction.c) ---- */

#define SL_PLAN_MAX_GENERATORS 10

/* The defining relation of a fractional design: every product of generator
 * words I = factor * its generating factors, as factor bit masks (bit f for
 * plan->factors[f]), and the resolution, the length of the shortest word
 * (Box and Hunter; Montgomery, Design and Analysis of Experiments, ch. 8).
 * A design without generators has no words and resolution 0. */
typedef struct {
    size_t n_words;
    unsigned long words[(1u << SL_PLAN_MAX_GENERATORS) - 1];
    int resolution;
} sl_plan_fraction;

/* Fill the defining relation of the plan's generators.
 * Returns SL_OK, SL_EINPUT (more than SL_PLAN_MAX_GENERATORS generators). */
sl_status sl_plan_fraction_info(sl_plan_fraction *out, const sl_plan *plan);

/* An effect's name from its factor mask: factor names joined by '*' in factor
 * order ("dielectric*anneal"); "I" for 0. Returns the length it needs. */
size_t sl_plan_effect_name(char *buf, size_t size, const sl_plan *plan, unsigned long mask);

/* The alias chains of the main effects and two-factor interactions, each
 * once, as "cap = dielectric*anneal" (an effect, then its aliases of up to
 * three factors, shortest first; higher interactions are left out), and
 * whether some main effect is aliased with a two-factor interaction. *out is
 * a malloc'd array of malloc'd strings (free each, then the array); none for
 * a design without generators. Returns SL_OK, SL_EINPUT, SL_ENOMEM. */
sl_status sl_plan_fraction_aliases(char ***out, size_t *n, int *main_with_2fi,
                                   const sl_plan *plan);

/* 64-bit FNV-1a hash of the plan text, as 16 lowercase hex digits + NUL. */
void sl_plan_hash_hex(const sl_plan *plan, char out[17]);

#endif
