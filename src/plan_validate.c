/* SPDX-License-Identifier: MIT
 * The meaning of a plan's keys (docs/formats.md): the node tree from
 * plan.c turned into an sl_plan, every problem reported at its line:col with a
 * did-you-mean where a near name exists, both design kinds normalised, and the
 * physics warnings (neutrality point outside the gate range, thermal floor).
 */
#include "plan_internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/text.h"

#define MAX_LIST 256      /* materials, dielectrics, treatments, temperatures */
#define MAX_LAYERS 16
#define MAX_FACTORS 16
#define MAX_SPLITS 4096
#define MAX_WAFERS 9999

typedef struct {
    const char *key;
    int required;
} field;

enum {
    K_LOT, K_TITLE, K_GRAPHENE, K_TEMPERATURES, K_DEVICE, K_WAFER_MAP, K_YIELD, K_BASELINE,
    K_MATERIALS, K_DIELECTRICS, K_TREATMENTS, K_DESIGN, K_WAFERS, K_DEVICES, K_SEED,
    K_RESOLVE, K_PROCESSED, K_BATCHES, K_VARIATION, K_DEVICE_TYPES, K_COUNT
};

static const field root_fields[K_COUNT] = {
    { "lot", 1 }, { "title", 0 }, { "graphene", 0 }, { "temperatures_K", 1 }, { "device", 0 },
    { "wafer_map", 0 }, { "expected_yield", 0 }, { "baseline_doping_per_cm2", 0 },
    { "materials", 0 }, { "dielectrics", 1 }, { "treatments", 0 }, { "design", 1 },
    { "wafers", 1 }, { "devices_per_wafer", 1 }, { "seed", 0 }, { "resolve", 0 },
    { "processed", 0 }, { "batches", 0 }, { "variation", 0 }, { "device_types", 0 },
};

/* Where things were written, for messages found after the conversion. */
typedef struct {
    plan_ctx *c;
    sl_plan *p;
    const yn *at[K_COUNT];
    const yn **gate_range_at; /* per dielectric, NULL when not given */
    const yn **split_at;      /* per split */
    const yn *shift_at;
    const yn *root;
    const yn *generators_at;
    const yn *batch_sigma_at;
} conv;

/* ---- names: every named struct of plan.h starts with its char *name ---- */

/* "" for an entry whose name is missing or broken (an error is out already). */
static const char *name_at(const void *base, size_t stride, size_t i)
{
    const char *name = *(char *const *)((const char *)base + i * stride);
    return name ? name : "";
}

static long find_named(const void *base, size_t n, size_t stride, const char *name)
{
    for (size_t i = 0; i < n; i++) {
        const char *entry = *(char *const *)((const char *)base + i * stride);
        if (entry && strcmp(entry, name) == 0)
            return (long)i;
    }
    return -1;
}

/* "unknown <what> 'name'", with the did-you-mean of sl_text_did_you_mean. */
static void unknown_name(plan_ctx *c, const yn *at, const char *what, const char *const *names,
                         size_t n)
{
    char hint[96];
    sl__plan_error(c, at, "unknown %s '%s'%s", what, at->text,
               sl_text_did_you_mean(hint, sizeof hint, at->text, names, n));
}

static void unknown_named(plan_ctx *c, const yn *at, const char *what, const void *base,
                          size_t n, size_t stride)
{
    const char **names = sl__plan_calloc(c, n, sizeof *names);
    if (!names)
        return;
    for (size_t i = 0; i < n; i++)
        names[i] = name_at(base, stride, i);
    unknown_name(c, at, what, names, n);
    free(names);
}

/* ---- typed values ---- */

static const char *kind_name(yn_kind k)
{
    return k == YN_SEQ ? "list" : (k == YN_MAP ? "mapping" : "single value");
}

static int want_kind(plan_ctx *c, const yn *v, yn_kind kind, const char *name)
{
    if (v->kind == kind)
        return 0;
    sl__plan_error(c, v, "'%s' must be a %s, not a %s", name, kind_name(kind), kind_name(v->kind));
    return -1;
}

typedef enum { NUM_ANY, NUM_POSITIVE, NUM_NONNEG, NUM_YIELD, NUM_PROBABILITY } num_rule;

static int rule_holds(num_rule rule, double x)
{
    switch (rule) {
    case NUM_POSITIVE: return x > 0.0;
    case NUM_NONNEG: return x >= 0.0;
    case NUM_YIELD: return x > 0.0 && x <= 1.0;
    case NUM_PROBABILITY: return x > 0.0 && x < 1.0;
    default: return 1;
    }
}

static const char *const rule_text[] = {
    "", "must be > 0", "must be >= 0", "must be in (0, 1]", "must be in (0, 1)",
};

static int read_number(plan_ctx *c, const yn *v, const char *name, num_rule rule, double *out)
{
    if (want_kind(c, v, YN_SCALAR, name) != 0)
        return -1;
    char *end = NULL;
    errno = 0;
    double x = strtod(v->text, &end);
    if (v->quoted || end == v->text || *end != '\0' || errno == ERANGE || !isfinite(x)) {
        sl__plan_error(c, v, "'%s' must be a number, got '%s'", name, v->text);
        return -1;
    }
    if (!rule_holds(rule, x)) {
        sl__plan_error(c, v, "'%s' %s, got '%s'", name, rule_text[rule], v->text);
        return -1;
    }
    *out = x;
    return 0;
}

/* A number with a default for an absent key (v NULL). */
static void read_number_or(plan_ctx *c, const yn *v, const char *name, num_rule rule,
                           double fallback, double *out)
{
    *out = fallback;
    if (v)
        read_number(c, v, name, rule, out);
}

static int read_whole(plan_ctx *c, const yn *v, const char *name, long min, long max, long *out)
{
    if (want_kind(c, v, YN_SCALAR, name) != 0)
        return -1;
    char *end = NULL;
    errno = 0;
    long x = strtol(v->text, &end, 10);
    if (v->quoted || end == v->text || *end != '\0' || errno == ERANGE || x < min || x > max) {
        sl__plan_error(c, v, "'%s' must be a whole number from %ld to %ld, got '%s'", name, min, max,
                   v->text);
        return -1;
    }
    *out = x;
    return 0;
}

static int read_text(plan_ctx *c, const yn *v, const char *name, char **out)
{
    if (want_kind(c, v, YN_SCALAR, name) != 0)
        return -1;
    if (v->text[0] == '\0') {
        sl__plan_error(c, v, "'%s' must not be empty", name);
        return -1;
    }
    *out = sl__plan_strdup(c, v->text);
    return *out ? 0 : -1;
}

/* A list with 1..max items. */
static int read_list(plan_ctx *c, const yn *v, const char *name, size_t max)
{
    if (want_kind(c, v, YN_SEQ, name) != 0)
        return -1;
    if (v->n_items == 0 || v->n_items > max) {
        sl__plan_error(c, v, "'%s' must list 1 to %zu items, got %zu", name, max, v->n_items);
        return -1;
    }
    return 0;
}

/* ---- mappings ---- */

/* Report an unknown key; returns the field it is probably a typo of, or -1. */
static long unknown_key(plan_ctx *c, const yn *key, const char *what, const field *fields,
                        size_t n)
{
    const char *names[K_COUNT];
    for (size_t i = 0; i < n && i < K_COUNT; i++)
        names[i] = fields[i].key;
    const char *near = sl_text_suggest(key->text, names, n);
    char hint[96];
    sl__plan_error(c, key, "unknown key '%s' in %s%s", key->text, what,
               sl_text_did_you_mean(hint, sizeof hint, key->text, names, n));
    if (!near)
        return -1;
    for (size_t i = 0; i < n; i++)
        if (names[i] == near)
            return (long)i;
    return -1;
}

/* Match a mapping's keys with fields: values[i] is the value of fields[i] or
 * NULL. Unknown, duplicate and missing required keys are reported; a missing
 * key already named in a did-you-mean is not reported twice. */
static int read_map(plan_ctx *c, const yn *node, const char *what, const field *fields, size_t n,
                    const yn **values)
{
    unsigned char suggested[K_COUNT] = { 0 };
    for (size_t i = 0; i < n; i++)
        values[i] = NULL;
    if (node->kind != YN_MAP) {
        sl__plan_error(c, node, "%s must be a mapping of keys, not a %s", what, kind_name(node->kind));
        return -1;
    }
    for (size_t k = 0; k + 1 < node->n_items; k += 2) {
        const yn *key = node->items[k];
        long f = -1;
        if (key->kind != YN_SCALAR) {
            sl__plan_error(c, key, "a key in %s must be plain text, not a %s", what,
                       kind_name(key->kind));
            continue;
        }
        for (size_t i = 0; i < n && f < 0; i++)
            if (strcmp(fields[i].key, key->text) == 0)
                f = (long)i;
        if (f < 0) {
            long near = unknown_key(c, key, what, fields, n);
            if (near >= 0)
                suggested[near] = 1;
        } else if (values[f])
            sl__plan_error(c, key, "duplicate key '%s' in %s", key->text, what);
        else
            values[f] = node->items[k + 1];
    }
    for (size_t i = 0; i < n; i++)
        if (fields[i].required && !values[i] && !suggested[i])
            sl__plan_error(c, node, "missing required key '%s' in %s", fields[i].key, what);
    return 0;
}

/* { mean, sigma } and, where tolerance is not NULL, an optional tolerance
 * (NaN when not given: the level's sigma stands in). */
static void read_estimate_tol(plan_ctx *c, const yn *v, const char *what, sl_est *out,
                              double *tolerance)
{
    static const field fields[] = { { "mean", 1 }, { "sigma", 0 }, { "tolerance", 0 } };
    const yn *f[3] = { NULL, NULL, NULL };
    *out = (sl_est){ 0.0, 0.0 };
    if (tolerance)
        *tolerance = NAN;
    if (read_map(c, v, what, fields, tolerance ? 3 : 2, f) != 0)
        return;
    if (f[0])
        read_number(c, f[0], "mean", NUM_ANY, &out->val);
    read_number_or(c, f[1], "sigma", NUM_NONNEG, 0.0, &out->sigma);
    if (tolerance && f[2])
        read_number(c, f[2], "tolerance", NUM_NONNEG, tolerance);
}

static void read_estimate(plan_ctx *c, const yn *v, const char *what, sl_est *out)
{
    read_estimate_tol(c, v, what, out, NULL);
}

/* A name for a dielectric, treatment or split: not empty, unique; no '+' in
 * the names that full-factorial split names are made of. */
static char *read_name(plan_ctx *c, const yn *v, const char *what, const void *base, size_t n,
                       size_t stride)
{
    char *name = NULL;
    if (read_text(c, v, "name", &name) != 0)
        return NULL;
    if (strcmp(what, "split") != 0 && strchr(name, '+'))
        sl__plan_error(c, v, "%s name '%s' must not contain '+' (split names join names with '+')",
                   what, name);
    else if (find_named(base, n, stride, name) >= 0)
        sl__plan_error(c, v, "duplicate %s name '%s'", what, name);
    return name;
}

/* ---- simple sections ---- */

static void read_graphene(conv *v)
{
    static const field fields[] = { { "fermi_velocity_m_s", 0 }, { "disorder_density_per_cm2", 0 } };
    const yn *f[2] = { NULL, NULL };
    const yn *node = v->at[K_GRAPHENE];
    if (node)
        read_map(v->c, node, "graphene", fields, 2, f);
    read_number_or(v->c, f[0], "fermi_velocity_m_s", NUM_POSITIVE, SL_SI_DEFAULT_FERMI_VELOCITY,
                   &v->p->fermi_velocity_m_s);
    read_number_or(v->c, f[1], "disorder_density_per_cm2", NUM_NONNEG, 0.0,
                   &v->p->disorder_density_per_cm2);
}

static void read_temperatures(conv *v)
{
    const yn *node = v->at[K_TEMPERATURES];
    if (!node || read_list(v->c, node, "temperatures_K", 64) != 0)
        return;
    v->p->temperatures_K = sl__plan_calloc(v->c, node->n_items, sizeof(double));
    if (!v->p->temperatures_K)
        return;
    v->p->n_temperatures = node->n_items;
    for (size_t i = 0; i < node->n_items; i++)
        read_number(v->c, node->items[i], "temperatures_K", NUM_NONNEG, &v->p->temperatures_K[i]);
}

static void read_device(conv *v)
{
    static const field fields[] = { { "channel_length_um", 1 }, { "channel_width_um", 1 },
                                    { "max_hysteresis_V", 0 } };
    const yn *f[3] = { NULL, NULL, NULL };
    /* Without a device block the channel is taken as square, 10 um x 10 um. */
    if (v->at[K_DEVICE])
        read_map(v->c, v->at[K_DEVICE], "device", fields, 3, f);
    read_number_or(v->c, f[0], "channel_length_um", NUM_POSITIVE, 10.0, &v->p->channel_length_um);
    read_number_or(v->c, f[1], "channel_width_um", NUM_POSITIVE, 10.0, &v->p->channel_width_um);
    read_number_or(v->c, f[2], "max_hysteresis_V", NUM_POSITIVE, NAN, &v->p->max_hysteresis_V);
}

static void read_device_type(conv *v, const yn *item, size_t index)
{
    static const field fields[] = { { "name", 1 }, { "channel_length_um", 1 },
                                    { "channel_width_um", 1 } };
    const yn *f[3];
    sl_plan_device_type *t = &v->p->device_types[index];
    if (read_map(v->c, item, "a device type", fields, 3, f) != 0)
        return;
    if (f[0])
        t->name = read_name(v->c, f[0], "device type", v->p->device_types, index, sizeof *t);
    if (f[1])
        read_number(v->c, f[1], "channel_length_um", NUM_POSITIVE, &t->channel_length_um);
    if (f[2])
        read_number(v->c, f[2], "channel_width_um", NUM_POSITIVE, &t->channel_width_um);
}

static void read_device_types(conv *v)
{
    const yn *node = v->at[K_DEVICE_TYPES];
    if (!node || read_list(v->c, node, "device_types", 64) != 0)
        return;
    v->p->device_types = sl__plan_calloc(v->c, node->n_items, sizeof *v->p->device_types);
    if (!v->p->device_types)
        return;
    v->p->n_device_types = node->n_items;
    for (size_t i = 0; i < node->n_items; i++)
        read_device_type(v, node->items[i], i);
}

/* wafer_map.first_die: two whole numbers [die_x, die_y], negative allowed. */
static void read_first_die(conv *v, const yn *node)
{
    if (want_kind(v->c, node, YN_SEQ, "first_die") != 0)
        return;
    if (node->n_items != 2) {
        sl__plan_error(v->c, node, "'first_die' must be [die_x, die_y], got %zu items", node->n_items);
        return;
    }
    read_whole(v->c, node->items[0], "first_die", -100000, 100000, &v->p->first_die_x);
    read_whole(v->c, node->items[1], "first_die", -100000, 100000, &v->p->first_die_y);
}

static void read_devices_and_map(conv *v)
{
    static const field fields[] = { { "rows", 1 }, { "cols", 1 }, { "first_die", 0 },
                                    { "devices_per_die", 0 } };
    sl_plan *p = v->p;
    p->devices_per_die = 1;
    if (v->at[K_DEVICES])
        read_whole(v->c, v->at[K_DEVICES], "devices_per_wafer", 1, 1000000, &p->devices_per_wafer);
    if (!v->at[K_WAFER_MAP]) {
        /* the smallest square map that holds every device */
        p->wafer_rows = p->wafer_cols = (long)ceil(sqrt((double)p->devices_per_wafer));
        return;
    }
    const yn *f[4];
    if (read_map(v->c, v->at[K_WAFER_MAP], "wafer_map", fields, 4, f) != 0 || !f[0] || !f[1])
        return;
    if (f[2])
        read_first_die(v, f[2]);
    if (f[3])
        read_whole(v->c, f[3], "devices_per_die", 1, 1000, &p->devices_per_die);
    p->devices_per_die_given = f[3] != NULL;
    if (read_whole(v->c, f[0], "rows", 1, 1000, &p->wafer_rows) != 0 ||
        read_whole(v->c, f[1], "cols", 1, 1000, &p->wafer_cols) != 0)
        return;
    long sites = p->wafer_rows * p->wafer_cols * p->devices_per_die;
    if (p->devices_per_wafer > sites)
        sl__plan_error(v->c, v->at[K_DEVICES],
                   "devices_per_wafer %ld is more than the %ld sites of the %ld x %ld wafer_map "
                   "with %ld device%s per die",
                   p->devices_per_wafer, sites, p->wafer_rows, p->wafer_cols,
                   p->devices_per_die, p->devices_per_die == 1 ? "" : "s");
}

static void read_seed(conv *v)
{
    const yn *node = v->at[K_SEED];
    v->p->seed = 1; /* a fixed default keeps layouts reproducible */
    if (!node || want_kind(v->c, node, YN_SCALAR, "seed") != 0)
        return;
    char *end = NULL;
    errno = 0;
    unsigned long long s = strtoull(node->text, &end, 10);
    /* 32 bits: the generator uses no more, so larger seeds would repeat layouts */
    if (node->quoted || end == node->text || *end != '\0' || errno == ERANGE ||
        node->text[0] == '-' || s > 4294967295ULL)
        sl__plan_error(v->c, node, "'seed' must be a whole number from 0 to 4294967295, got '%s'",
                   node->text);
    else
        v->p->seed = (uint64_t)s;
}

static void read_scalars(conv *v)
{
    sl_plan *p = v->p;
    if (v->at[K_LOT])
        read_text(v->c, v->at[K_LOT], "lot", &p->lot);
    if (v->at[K_TITLE] && v->at[K_TITLE]->kind == YN_SCALAR)
        p->title = sl__plan_strdup(v->c, v->at[K_TITLE]->text);
    else if (v->at[K_TITLE])
        want_kind(v->c, v->at[K_TITLE], YN_SCALAR, "title");
    if (!p->title)
        p->title = sl__plan_strdup(v->c, "");
    read_graphene(v);
    read_temperatures(v);
    read_device(v);
    read_device_types(v);
    read_devices_and_map(v);
    read_number_or(v->c, v->at[K_YIELD], "expected_yield", NUM_YIELD, 1.0, &p->expected_yield);
    if (v->at[K_BASELINE])
        read_estimate(v->c, v->at[K_BASELINE], "baseline_doping_per_cm2",
                      &p->baseline_doping_per_cm2);
    read_seed(v);
    p->gate_derating = 0.5;
}

/* ---- materials, dielectrics, treatments ---- */

static void read_material(conv *v, const yn *item, unsigned char *from_plan)
{
    static const field fields[] = {
        { "name", 1 }, { "relative_permittivity", 1 }, { "breakdown_MV_per_cm", 1 },
    };
    const yn *f[3];
    sl_plan *p = v->p;
    char *name = NULL;
    if (read_map(v->c, item, "material", fields, 3, f) != 0 || !f[0] ||
        read_text(v->c, f[0], "name", &name) != 0)
        return;
    long at = find_named(p->materials, p->n_materials, sizeof *p->materials, name);
    if (at >= 0 && from_plan[at]) {
        sl__plan_error(v->c, f[0], "duplicate material name '%s'", name);
        free(name);
        return;
    }
    if (at < 0) {
        at = (long)p->n_materials++;
        p->materials[at].name = name;
    } else {
        free(name); /* a built-in overridden by the plan */
    }
    from_plan[at] = 1;
    sl_plan_material *m = &p->materials[at];
    if (f[1])
        read_number(v->c, f[1], "relative_permittivity", NUM_POSITIVE, &m->relative_permittivity);
    if (f[2])
        read_number(v->c, f[2], "breakdown_MV_per_cm", NUM_POSITIVE, &m->breakdown_MV_per_cm);
}

static void read_materials(conv *v)
{
    sl_plan *p = v->p;
    const yn *node = v->at[K_MATERIALS];
    size_t n_builtin = sl_physics_material_count();
    size_t extra = 0;
    if (node && read_list(v->c, node, "materials", MAX_LIST) == 0)
        extra = node->n_items;
    p->materials = sl__plan_calloc(v->c, n_builtin + extra, sizeof *p->materials);
    unsigned char *from_plan = sl__plan_calloc(v->c, n_builtin + extra, 1);
    if (!p->materials || !from_plan) {
        free(from_plan);
        return;
    }
    for (size_t i = 0; i < n_builtin; i++) {
        const sl_material *m = sl_physics_material_at(i);
        p->materials[i].name = sl__plan_strdup(v->c, m->name);
        p->materials[i].relative_permittivity = m->relative_permittivity;
        p->materials[i].breakdown_MV_per_cm = m->breakdown_MV_per_cm;
        p->n_materials++;
    }
    for (size_t i = 0; i < extra && !v->c->nomem; i++)
        read_material(v, node->items[i], from_plan);
    free(from_plan);
}

static void read_layer(conv *v, const yn *item, sl_plan_layer *layer)
{
    static const field fields[] = { { "material", 1 }, { "thickness_nm", 1 }, { "sigma_nm", 0 } };
    const yn *f[3];
    sl_plan *p = v->p;
    if (read_map(v->c, item, "layer", fields, 3, f) != 0)
        return;
    if (f[0] && read_text(v->c, f[0], "material", &layer->material) == 0 &&
        !sl_plan_material_find(p, layer->material))
        unknown_named(v->c, f[0], "material", p->materials, p->n_materials, sizeof *p->materials);
    if (f[1])
        read_number(v->c, f[1], "thickness_nm", NUM_POSITIVE, &layer->thickness_nm);
    read_number_or(v->c, f[2], "sigma_nm", NUM_NONNEG, 0.0, &layer->sigma_nm);
}

static void read_gate_range(conv *v, const yn *node, sl_plan_dielectric *d)
{
    if (want_kind(v->c, node, YN_SEQ, "gate_range_V") != 0)
        return;
    if (node->n_items != 2) {
        sl__plan_error(v->c, node, "'gate_range_V' must be [min, max], got %zu values", node->n_items);
        return;
    }
    if (read_number(v->c, node->items[0], "gate_range_V", NUM_ANY, &d->gate_range_V[0]) != 0 ||
        read_number(v->c, node->items[1], "gate_range_V", NUM_ANY, &d->gate_range_V[1]) != 0)
        return;
    if (!(d->gate_range_V[0] < 0.0 && d->gate_range_V[1] > 0.0))
        sl__plan_error(v->c, node, "gate_range_V [%g, %g] does not contain 0 V", d->gate_range_V[0],
                   d->gate_range_V[1]);
    else
        d->has_gate_range = 1;
}

/* The expected mobility of a dielectric's devices: { mean > 0, sigma >= 0 }. */
static void read_mobility(plan_ctx *c, const yn *v, sl_plan_dielectric *d)
{
    static const field fields[] = { { "mean", 1 }, { "sigma", 1 } };
    const yn *f[2] = { NULL, NULL };
    if (read_map(c, v, "mobility_cm2_per_Vs", fields, 2, f) != 0)
        return;
    d->has_mobility = 1;
    if (f[0])
        read_number(c, f[0], "mean", NUM_POSITIVE, &d->mobility_cm2_per_Vs.val);
    if (f[1])
        read_number(c, f[1], "sigma", NUM_NONNEG, &d->mobility_cm2_per_Vs.sigma);
}

static void read_dielectric(conv *v, const yn *item, size_t index)
{
    static const field fields[] = {
        { "name", 1 }, { "layers", 1 }, { "doping_per_cm2", 0 }, { "gate_range_V", 0 },
        { "mobility_cm2_per_Vs", 0 },
    };
    const yn *f[5];
    sl_plan *p = v->p;
    sl_plan_dielectric *d = &p->dielectrics[index];
    if (read_map(v->c, item, "dielectric", fields, 5, f) != 0)
        return;
    if (f[4])
        read_mobility(v->c, f[4], d);
    if (f[0])
        d->name = read_name(v->c, f[0], "dielectric", p->dielectrics, index, sizeof *d);
    if (f[1] && read_list(v->c, f[1], "layers", MAX_LAYERS) == 0) {
        d->layers = sl__plan_calloc(v->c, f[1]->n_items, sizeof *d->layers);
        for (size_t j = 0; d->layers && j < f[1]->n_items; j++) {
            d->n_layers++;
            read_layer(v, f[1]->items[j], &d->layers[j]);
        }
    }
    d->doping_tolerance_per_cm2 = NAN;
    if (f[2])
        read_estimate_tol(v->c, f[2], "doping_per_cm2", &d->doping_per_cm2,
                          &d->doping_tolerance_per_cm2);
    if (f[3]) {
        v->gate_range_at[index] = f[3];
        read_gate_range(v, f[3], d);
    }
}

static void read_dielectrics(conv *v)
{
    const yn *node = v->at[K_DIELECTRICS];
    if (!node || read_list(v->c, node, "dielectrics", MAX_LIST) != 0)
        return;
    v->p->dielectrics = sl__plan_calloc(v->c, node->n_items, sizeof *v->p->dielectrics);
    v->gate_range_at = sl__plan_calloc(v->c, node->n_items, sizeof *v->gate_range_at);
    if (!v->p->dielectrics || !v->gate_range_at)
        return;
    for (size_t i = 0; i < node->n_items && !v->c->nomem; i++) {
        v->p->n_dielectrics++;
        read_dielectric(v, node->items[i], i);
    }
}

static void read_treatment(conv *v, const yn *item, size_t index)
{
    static const field fields[] = { { "name", 1 }, { "doping_per_cm2", 1 } };
    const yn *f[2];
    sl_plan *p = v->p;
    sl_plan_treatment *t = &p->treatments[index];
    if (read_map(v->c, item, "treatment", fields, 2, f) != 0)
        return;
    if (f[0])
        t->name = read_name(v->c, f[0], "treatment", p->treatments, index, sizeof *t);
    if (t->name && strcmp(t->name, "none") == 0)
        sl__plan_error(v->c, f[0], "'none' is reserved for the level without a treatment");
    t->doping_tolerance_per_cm2 = NAN;
    if (f[1])
        read_estimate_tol(v->c, f[1], "doping_per_cm2", &t->doping_per_cm2,
                          &t->doping_tolerance_per_cm2);
}

static void read_treatments(conv *v)
{
    const yn *node = v->at[K_TREATMENTS];
    if (!node || read_list(v->c, node, "treatments", MAX_LIST) != 0)
        return;
    v->p->treatments = sl__plan_calloc(v->c, node->n_items, sizeof *v->p->treatments);
    for (size_t i = 0; v->p->treatments && i < node->n_items && !v->c->nomem; i++) {
        v->p->n_treatments++;
        read_treatment(v, node->items[i], i);
    }
}

/* ---- wafers ---- */

static void number_wafers(conv *v, long count)
{
    sl_plan *p = v->p;
    p->wafers = sl__plan_calloc(v->c, (size_t)count, sizeof *p->wafers);
    for (long i = 0; p->wafers && i < count; i++) {
        char id[24];
        snprintf(id, sizeof id, "W%02ld", i + 1); /* W01..W99, then W100.. */
        p->wafers[i] = sl__plan_strdup(v->c, id);
        p->n_wafers++;
    }
}

static void list_wafers(conv *v, const yn *node)
{
    sl_plan *p = v->p;
    if (read_list(v->c, node, "wafers", MAX_WAFERS) != 0)
        return;
    p->wafers = sl__plan_calloc(v->c, node->n_items, sizeof *p->wafers);
    for (size_t i = 0; p->wafers && i < node->n_items; i++) {
        char *id = NULL;
        if (read_text(v->c, node->items[i], "wafers", &id) != 0)
            continue;
        if (sl_plan_wafer_index(p, id) >= 0) {
            sl__plan_error(v->c, node->items[i], "duplicate wafer '%s'", id);
            free(id);
            continue;
        }
        p->wafers[p->n_wafers++] = id;
    }
}

static void read_wafers(conv *v)
{
    const yn *node = v->at[K_WAFERS];
    long count = 0;
    if (!node)
        return;
    if (node->kind == YN_SEQ)
        list_wafers(v, node);
    else if (read_whole(v->c, node, "wafers", 1, MAX_WAFERS, &count) == 0)
        number_wafers(v, count);
}

/* ---- design ---- */

enum { D_KIND, D_FACTORS, D_WAFERS_PER_SPLIT, D_SPLITS, D_GENERATORS, D_COUNT };

static int add_level(conv *v, sl_plan_factor *f, const char *level, long ref)
{
    f->levels[f->n_levels] = sl__plan_strdup(v->c, level);
    f->level_ref[f->n_levels] = ref;
    f->n_levels++;
    return f->levels[f->n_levels - 1] ? 0 : -1;
}

static int alloc_levels(conv *v, sl_plan_factor *f, const char *name, size_t max)
{
    f->name = sl__plan_strdup(v->c, name);
    f->levels = sl__plan_calloc(v->c, max, sizeof *f->levels);
    f->level_ref = sl__plan_calloc(v->c, max, sizeof *f->level_ref);
    return (f->name && f->levels && f->level_ref) ? 0 : -1;
}

/* The index a level name refers to: dielectric for factor 0, else treatment
 * or -1 for "none"; -2 after reporting an unknown name. */
static long level_reference(conv *v, const yn *level, int is_dielectric)
{
    sl_plan *p = v->p;
    if (is_dielectric) {
        long d = find_named(p->dielectrics, p->n_dielectrics, sizeof *p->dielectrics, level->text);
        if (d < 0)
            unknown_named(v->c, level, "dielectric", p->dielectrics, p->n_dielectrics,
                          sizeof *p->dielectrics);
        return d < 0 ? -2 : d;
    }
    if (strcmp(level->text, "none") == 0)
        return -1;
    long t = find_named(p->treatments, p->n_treatments, sizeof *p->treatments, level->text);
    if (t < 0)
        unknown_named(v->c, level, "treatment", p->treatments, p->n_treatments,
                      sizeof *p->treatments);
    return t < 0 ? -2 : t;
}

/* A treatment may sit in one factor only, else a split would get it twice. */
static int treatment_in_other_factor(const sl_plan *p, size_t upto, long t)
{
    for (size_t i = 1; i < upto; i++)
        for (size_t j = 0; j < p->factors[i].n_levels; j++)
            if (p->factors[i].level_ref[j] == t)
                return 1;
    return 0;
}

static int read_level(conv *v, sl_plan_factor *f, size_t index, const yn *level)
{
    if (want_kind(v->c, level, YN_SCALAR, f->name) != 0)
        return -1;
    for (size_t j = 0; j < f->n_levels; j++)
        if (strcmp(f->levels[j], level->text) == 0) {
            sl__plan_error(v->c, level, "duplicate level '%s' in factor '%s'", level->text, f->name);
            return -1;
        }
    long ref = level_reference(v, level, index == 0);
    if (ref == -2)
        return -1;
    if (index > 0 && ref >= 0 && treatment_in_other_factor(v->p, index, ref)) {
        sl__plan_error(v->c, level, "treatment '%s' is already a level of another factor",
                   level->text);
        return -1;
    }
    return add_level(v, f, level->text, ref);
}

/* Level 0 is the reference: "none" where a factor has it. */
static void none_first(sl_plan_factor *f)
{
    for (size_t j = 1; j < f->n_levels; j++)
        if (f->level_ref[j] == -1) {
            char *name = f->levels[j];
            memmove(&f->levels[1], &f->levels[0], j * sizeof *f->levels);
            memmove(&f->level_ref[1], &f->level_ref[0], j * sizeof *f->level_ref);
            f->levels[0] = name;
            f->level_ref[0] = -1;
            return;
        }
}

static void read_factor(conv *v, size_t index, const yn *key, const yn *levels,
                        const yn **dielectric_at)
{
    sl_plan_factor *f = &v->p->factors[index];
    v->p->n_factors = index + 1 > v->p->n_factors ? index + 1 : v->p->n_factors;
    if (read_list(v->c, levels, key->text, MAX_LIST) != 0 ||
        alloc_levels(v, f, key->text, levels->n_items) != 0)
        return;
    for (size_t j = 0; j < levels->n_items; j++)
        if (read_level(v, f, index, levels->items[j]) == 0 && index == 0)
            dielectric_at[f->n_levels - 1] = levels->items[j];
    none_first(f);
}

static int factor_key_ok(conv *v, const yn *key, const yn *map, size_t k)
{
    if (key->kind != YN_SCALAR) {
        sl__plan_error(v->c, key, "a factor name must be plain text, not a %s", kind_name(key->kind));
        return 0;
    }
    for (size_t j = 0; j < k; j += 2)
        if (map->items[j]->kind == YN_SCALAR && strcmp(map->items[j]->text, key->text) == 0) {
            sl__plan_error(v->c, key, "duplicate factor '%s'", key->text);
            return 0;
        }
    return 1;
}

/* Factor 0 is "dielectric" wherever the plan wrote it; others keep their order. */
static void read_factors(conv *v, const yn *map, const yn **dielectric_at)
{
    if (want_kind(v->c, map, YN_MAP, "factors") != 0)
        return;
    size_t n = map->n_items / 2;
    if (n > MAX_FACTORS) {
        sl__plan_error(v->c, map, "'factors' may have at most %d factors, got %zu", MAX_FACTORS, n);
        return;
    }
    v->p->factors = sl__plan_calloc(v->c, n + 1, sizeof *v->p->factors);
    size_t next = 1;
    int seen_dielectric = 0;
    for (size_t k = 0; v->p->factors && k + 1 < map->n_items && !v->c->nomem; k += 2) {
        const yn *key = map->items[k];
        if (!factor_key_ok(v, key, map, k))
            continue;
        int is_dielectric = strcmp(key->text, "dielectric") == 0;
        seen_dielectric |= is_dielectric;
        read_factor(v, is_dielectric ? 0 : next++, key, map->items[k + 1], dielectric_at);
    }
    if (!seen_dielectric)
        sl__plan_error(v->c, map, "missing required key 'dielectric' in factors");
}

static int memchr_size(const size_t *a, size_t n, size_t x)
{
    for (size_t i = 0; i < n; i++)
        if (a[i] == x)
            return 1;
    return 0;
}

static int make_split(conv *v, sl_plan_split *s, size_t dielectric, const size_t *levels)
{
    sl_plan *p = v->p;
    s->dielectric = dielectric;
    s->levels = sl__plan_calloc(v->c, p->n_factors, sizeof *s->levels);
    s->treatments = sl__plan_calloc(v->c, p->n_factors, sizeof *s->treatments);
    if (!s->levels || !s->treatments)
        return -1;
    memcpy(s->levels, levels, p->n_factors * sizeof *levels);
    return 0;
}

/* "dielectric+treatment+..." for the non-none levels, in factor order. */
static void factorial_split(conv *v, sl_plan_split *s, const size_t *levels)
{
    sl_plan *p = v->p;
    size_t len = 1;
    for (size_t f = 0; f < p->n_factors; f++)
        len += strlen(p->factors[f].levels[levels[f]]) + 1;
    if (make_split(v, s, (size_t)p->factors[0].level_ref[levels[0]], levels) != 0)
        return;
    s->name = sl__plan_calloc(v->c, len, 1);
    if (!s->name)
        return;
    strcpy(s->name, p->factors[0].levels[levels[0]]);
    for (size_t f = 1; f < p->n_factors; f++) {
        long ref = p->factors[f].level_ref[levels[f]];
        if (ref < 0)
            continue;
        strcat(s->name, "+");
        strcat(s->name, p->factors[f].levels[levels[f]]);
        s->treatments[s->n_treatments++] = (size_t)ref;
    }
}

/* Factors whose level a generator sets: bit f for factor f. */
static unsigned long generated_mask(const sl_plan *p)
{
    unsigned long mask = 0;
    for (size_t g = 0; g < p->n_generators; g++)
        mask |= 1ul << p->generators[g].factor;
    return mask;
}

static size_t count_combinations(const sl_plan *p)
{
    size_t n = 1;
    unsigned long generated = generated_mask(p);
    for (size_t f = 0; f < p->n_factors; f++) {
        if (generated >> f & 1ul)
            continue;
        n *= p->factors[f].n_levels;
        if (n > MAX_SPLITS)
            return MAX_SPLITS + 1;
    }
    return n;
}

/* The generated factors' levels: code -1 for level 0, +1 for level 1, the
 * generated code the product of its factors' codes. */
static void set_generated_levels(const sl_plan *p, size_t *levels)
{
    for (size_t g = 0; g < p->n_generators; g++) {
        int sign = 1;
        for (size_t j = 0; j < p->generators[g].n_of; j++)
            sign *= levels[p->generators[g].of[j]] ? 1 : -1;
        levels[p->generators[g].factor] = sign > 0 ? 1 : 0;
    }
}

/* Every combination of the free factors' levels, the last factor changing
 * fastest; generated factors follow their generators. */
static void enumerate_splits(conv *v, const yn *factors_at, const yn **dielectric_at)
{
    sl_plan *p = v->p;
    size_t n = count_combinations(p);
    unsigned long generated = generated_mask(p);
    if (n > MAX_SPLITS) {
        sl__plan_error(v->c, factors_at, "the factors make more than %d splits", MAX_SPLITS);
        return;
    }
    size_t levels[MAX_FACTORS + 1] = { 0 };
    p->splits = sl__plan_calloc(v->c, n, sizeof *p->splits);
    v->split_at = sl__plan_calloc(v->c, n, sizeof *v->split_at);
    for (size_t i = 0; p->splits && v->split_at && i < n && !v->c->nomem; i++) {
        set_generated_levels(p, levels);
        factorial_split(v, &p->splits[i], levels);
        v->split_at[i] = dielectric_at[levels[0]];
        p->n_splits++;
        for (size_t f = p->n_factors; f-- > 0;) {
            if (generated >> f & 1ul)
                continue;
            if (++levels[f] < p->factors[f].n_levels)
                break;
            levels[f] = 0;
        }
    }
}

static int factors_complete(const sl_plan *p)
{
    if (p->n_factors == 0)
        return 0;
    for (size_t f = 0; f < p->n_factors; f++)
        if (p->factors[f].n_levels == 0)
            return 0;
    return 1;
}

static long factor_named(conv *v, const yn *name)
{
    sl_plan *p = v->p;
    if (want_kind(v->c, name, YN_SCALAR, "generators") != 0)
        return -1;
    long f = find_named(p->factors, p->n_factors, sizeof *p->factors, name->text);
    if (f < 0)
        unknown_named(v->c, name, "factor", p->factors, p->n_factors, sizeof *p->factors);
    else if (p->factors[f].n_levels != 2) {
        sl__plan_error(v->c, name, "factor '%s' has %zu levels; a generator takes two-level factors",
                   name->text, p->factors[f].n_levels);
        f = -1;
    }
    return f;
}

/* One generator "factor: [a, b, ...]": every name a two-level factor, at
 * least two of them, none generated, none twice. used[] marks factors met. */
static void read_generator(conv *v, const yn *key, const yn *list, unsigned char *used)
{
    sl_plan *p = v->p;
    long target = factor_named(v, key);
    if (target < 0 || want_kind(v->c, list, YN_SEQ, key->text) != 0)
        return;
    if (used[target]) {
        sl__plan_error(v->c, key, "factor '%s' is already in another generator", key->text);
        return;
    }
    if (list->n_items < 2 || list->n_items >= p->n_factors) {
        sl__plan_error(v->c, list, "generator of '%s' must list 2 to %zu other factors, got %zu",
                   key->text, p->n_factors - 1, list->n_items);
        return;
    }
    sl_plan_generator *g = &p->generators[p->n_generators];
    g->factor = (size_t)target;
    g->of = sl__plan_calloc(v->c, list->n_items, sizeof *g->of);
    for (size_t j = 0; g->of && j < list->n_items; j++) {
        long f = factor_named(v, list->items[j]);
        if (f >= 0 && (f == target || (used[f] & 2u) || memchr_size(g->of, g->n_of, (size_t)f))) {
            sl__plan_error(v->c, list->items[j], "factor '%s' cannot be in the generator of '%s'",
                       list->items[j]->text, key->text);
            f = -1;
        }
        if (f < 0) { /* the generator is dropped: the error is out */
            free(g->of);
            g->of = NULL;
            g->n_of = 0;
            return;
        }
        g->of[g->n_of++] = (size_t)f;
        used[f] |= 1u;
    }
    used[target] |= 2u;
    p->n_generators++;
}

static void read_generators(conv *v, const yn *map)
{
    sl_plan *p = v->p;
    if (want_kind(v->c, map, YN_MAP, "generators") != 0)
        return;
    if (map->n_items / 2 > SL_PLAN_MAX_GENERATORS) {
        sl__plan_error(v->c, map, "'generators' may have at most %d generators, got %zu",
                   SL_PLAN_MAX_GENERATORS, map->n_items / 2);
        return;
    }
    p->generators = sl__plan_calloc(v->c, map->n_items / 2 + 1, sizeof *p->generators);
    unsigned char used[MAX_FACTORS + 1] = { 0 };
    for (size_t k = 0; p->generators && k + 1 < map->n_items; k += 2)
        read_generator(v, map->items[k], map->items[k + 1], used);
    /* a factor used as a base after being generated is caught here */
    for (size_t g = 0; g < p->n_generators; g++)
        for (size_t j = 0; j < p->generators[g].n_of; j++)
            if (used[p->generators[g].of[j]] & 2u)
                sl__plan_error(v->c, map, "factor '%s' is generated and also generates '%s'",
                           p->factors[p->generators[g].of[j]].name,
                           p->factors[p->generators[g].factor].name);
    if (map->n_items == 0)
        sl__plan_error(v->c, map, "a fractional-factorial design needs at least one generator");
}

/* Main effects must stay apart: no word of length 1 or 2 in the defining relation. */
static void check_resolution(conv *v)
{
    sl_plan_fraction fr;
    if (sl_plan_fraction_info(&fr, v->p) == SL_OK && fr.resolution < 3)
        sl__plan_error(v->c, v->generators_at,
                   "the generators make two main effects the same column (resolution %d): "
                   "give each generator a different set of factors",
                   fr.resolution);
}

static void factorial_design(conv *v, const yn **d, int fractional)
{
    const char *kind = fractional ? "fractional-factorial" : "full-factorial";
    if (d[D_SPLITS])
        sl__plan_error(v->c, d[D_SPLITS], "'splits' belongs to an explicit design, not %s", kind);
    if (d[D_GENERATORS] && !fractional)
        sl__plan_error(v->c, d[D_GENERATORS],
                   "'generators' belongs to a fractional-factorial design, not full-factorial");
    if (!d[D_FACTORS] || !d[D_WAFERS_PER_SPLIT] || (fractional && !d[D_GENERATORS])) {
        sl__plan_error(v->c, v->at[K_DESIGN], "a %s design needs '%s'", kind,
                   !d[D_FACTORS] ? "factors"
                                 : (!d[D_WAFERS_PER_SPLIT] ? "wafers_per_split" : "generators"));
        return;
    }
    read_whole(v->c, d[D_WAFERS_PER_SPLIT], "wafers_per_split", 1, MAX_WAFERS,
               &v->p->wafers_per_split);
    const yn **dielectric_at = sl__plan_calloc(v->c, MAX_LIST, sizeof *dielectric_at);
    if (!dielectric_at)
        return;
    size_t errors = v->c->n_errors;
    read_factors(v, d[D_FACTORS], dielectric_at);
    if (fractional && errors == v->c->n_errors && factors_complete(v->p)) {
        v->generators_at = d[D_GENERATORS];
        read_generators(v, d[D_GENERATORS]);
        if (errors == v->c->n_errors)
            check_resolution(v);
    }
    if (errors == v->c->n_errors && factors_complete(v->p))
        enumerate_splits(v, d[D_FACTORS], dielectric_at);
    free(dielectric_at);
}

/* ---- explicit design ---- */

/* The factor of a treatment in an explicit design, made on first use. */
static long treatment_factor(conv *v, long t)
{
    sl_plan *p = v->p;
    const char *name = p->treatments[t].name;
    for (size_t f = 1; f < p->n_factors; f++)
        if (p->factors[f].level_ref[1] == t)
            return (long)f;
    sl_plan_factor *f = &p->factors[p->n_factors];
    if (alloc_levels(v, f, name, 2) != 0 || add_level(v, f, "none", -1) != 0 ||
        add_level(v, f, name, t) != 0)
        return -1;
    return (long)p->n_factors++;
}

static void dielectric_level(conv *v, size_t d)
{
    sl_plan_factor *f = &v->p->factors[0];
    for (size_t j = 0; j < f->n_levels; j++)
        if (f->level_ref[j] == (long)d)
            return;
    add_level(v, f, v->p->dielectrics[d].name, (long)d);
}

static int split_has(const sl_plan_split *s, size_t t)
{
    for (size_t j = 0; j < s->n_treatments; j++)
        if (s->treatments[j] == t)
            return 1;
    return 0;
}

static void split_treatments(conv *v, sl_plan_split *s, const yn *list)
{
    sl_plan *p = v->p;
    if (want_kind(v->c, list, YN_SEQ, "treatments") != 0)
        return;
    s->treatments = sl__plan_calloc(v->c, list->n_items, sizeof *s->treatments);
    for (size_t j = 0; s->treatments && j < list->n_items; j++) {
        const yn *item = list->items[j];
        if (want_kind(v->c, item, YN_SCALAR, "treatments") != 0 || strcmp(item->text, "none") == 0)
            continue;
        long t = find_named(p->treatments, p->n_treatments, sizeof *p->treatments, item->text);
        if (t < 0)
            unknown_named(v->c, item, "treatment", p->treatments, p->n_treatments,
                          sizeof *p->treatments);
        else if (split_has(s, (size_t)t))
            sl__plan_error(v->c, item, "treatment '%s' is listed twice in split '%s'", item->text,
                       name_at(s, sizeof *s, 0));
        else if (treatment_factor(v, t) >= 0)
            s->treatments[s->n_treatments++] = (size_t)t;
    }
}

static long wafer_owner(const sl_plan *p, size_t upto, const char *wafer)
{
    for (size_t i = 0; i < upto; i++)
        for (size_t j = 0; j < p->splits[i].n_wafers; j++)
            if (strcmp(p->splits[i].wafers[j], wafer) == 0)
                return (long)i;
    return -1;
}

static void split_wafers(conv *v, size_t index, const yn *list)
{
    sl_plan *p = v->p;
    sl_plan_split *s = &p->splits[index];
    if (read_list(v->c, list, "wafers", MAX_WAFERS) != 0)
        return;
    s->wafers = sl__plan_calloc(v->c, list->n_items, sizeof *s->wafers);
    for (size_t j = 0; s->wafers && j < list->n_items; j++) {
        const yn *item = list->items[j];
        if (want_kind(v->c, item, YN_SCALAR, "wafers") != 0)
            continue;
        long owner = wafer_owner(p, index + 1, item->text);
        if (sl_plan_wafer_index(p, item->text) < 0)
            sl__plan_error(v->c, item, "unknown wafer '%s' (not in 'wafers')", item->text);
        else if (owner >= 0)
            sl__plan_error(v->c, item, "wafer '%s' is already in split '%s'", item->text,
                       name_at(p->splits, sizeof *p->splits, (size_t)owner));
        else
            s->wafers[s->n_wafers++] = sl__plan_strdup(v->c, item->text);
    }
}

static void explicit_split(conv *v, size_t index, const yn *item)
{
    static const field fields[] = {
        { "name", 1 }, { "dielectric", 1 }, { "treatments", 0 }, { "wafers", 1 },
    };
    const yn *f[4];
    sl_plan *p = v->p;
    sl_plan_split *s = &p->splits[index];
    v->split_at[index] = item;
    if (read_map(v->c, item, "split", fields, 4, f) != 0)
        return;
    if (f[0])
        s->name = read_name(v->c, f[0], "split", p->splits, index, sizeof *s);
    if (f[1] && want_kind(v->c, f[1], YN_SCALAR, "dielectric") == 0) {
        long d = level_reference(v, f[1], 1);
        if (d >= 0) {
            s->dielectric = (size_t)d;
            dielectric_level(v, (size_t)d);
        }
    }
    if (f[2])
        split_treatments(v, s, f[2]);
    if (f[3])
        split_wafers(v, index, f[3]);
}

/* Level per factor, once every split is read and the factors are known. */
static void explicit_levels(conv *v)
{
    sl_plan *p = v->p;
    for (size_t i = 0; i < p->n_splits && !v->c->nomem; i++) {
        sl_plan_split *s = &p->splits[i];
        s->levels = sl__plan_calloc(v->c, p->n_factors, sizeof *s->levels);
        for (size_t j = 0; s->levels && j < p->factors[0].n_levels; j++)
            if (p->factors[0].level_ref[j] == (long)s->dielectric)
                s->levels[0] = j;
        for (size_t f = 1; s->levels && f < p->n_factors; f++)
            s->levels[f] = split_has(s, (size_t)p->factors[f].level_ref[1]) ? 1 : 0;
    }
}

static void explicit_design(conv *v, const yn **d)
{
    sl_plan *p = v->p;
    static const char *const keys[] = { "", "factors", "wafers_per_split", "", "generators" };
    for (int k = D_FACTORS; k < D_COUNT; k++)
        if (d[k] && k != D_SPLITS)
            sl__plan_error(v->c, d[k], "'%s' belongs to a %s design, not explicit", keys[k],
                       k == D_GENERATORS ? "fractional-factorial" : "full-factorial");
    if (!d[D_SPLITS]) {
        sl__plan_error(v->c, v->at[K_DESIGN], "an explicit design needs 'splits'");
        return;
    }
    if (read_list(v->c, d[D_SPLITS], "splits", MAX_SPLITS) != 0)
        return;
    size_t n = d[D_SPLITS]->n_items;
    p->factors = sl__plan_calloc(v->c, p->n_treatments + 1, sizeof *p->factors);
    p->splits = sl__plan_calloc(v->c, n, sizeof *p->splits);
    v->split_at = sl__plan_calloc(v->c, n, sizeof *v->split_at);
    if (!p->factors || !p->splits || !v->split_at ||
        alloc_levels(v, &p->factors[0], "dielectric", p->n_dielectrics) != 0)
        return;
    p->n_factors = 1;
    for (size_t i = 0; i < n && !v->c->nomem; i++) {
        p->n_splits++;
        explicit_split(v, i, d[D_SPLITS]->items[i]);
    }
    explicit_levels(v);
}

static void read_design(conv *v)
{
    static const field fields[D_COUNT] = {
        { "kind", 1 }, { "factors", 0 }, { "wafers_per_split", 0 }, { "splits", 0 },
        { "generators", 0 },
    };
    static const char *const kinds[] = { "full-factorial", "explicit", "fractional-factorial" };
    const yn *d[D_COUNT];
    if (!v->at[K_DESIGN] || read_map(v->c, v->at[K_DESIGN], "design", fields, D_COUNT, d) != 0 ||
        !d[D_KIND] || want_kind(v->c, d[D_KIND], YN_SCALAR, "kind") != 0)
        return;
    if (strcmp(d[D_KIND]->text, kinds[0]) == 0) {
        v->p->design_kind = SL_DESIGN_FULL_FACTORIAL;
        factorial_design(v, d, 0);
    } else if (strcmp(d[D_KIND]->text, kinds[1]) == 0) {
        v->p->design_kind = SL_DESIGN_EXPLICIT;
        explicit_design(v, d);
    } else if (strcmp(d[D_KIND]->text, kinds[2]) == 0) {
        v->p->design_kind = SL_DESIGN_FRACTIONAL_FACTORIAL;
        factorial_design(v, d, 1);
    } else {
        unknown_name(v->c, d[D_KIND], "design kind", kinds, 3);
    }
}

static void check_wafer_count(conv *v)
{
    const sl_plan *p = v->p;
    if (p->design_kind == SL_DESIGN_EXPLICIT || p->n_splits == 0 || !v->at[K_WAFERS])
        return;
    size_t needed = p->n_splits * (size_t)p->wafers_per_split;
    if (p->n_wafers < needed)
        sl__plan_error(v->c, v->at[K_WAFERS],
                   "%zu wafers are fewer than %zu splits x %ld wafers_per_split = %zu",
                   p->n_wafers, p->n_splits, p->wafers_per_split, needed);
}

static void read_resolve(conv *v)
{
    static const field fields[] = {
        { "shift_per_cm2", 0 }, { "shift_V", 0 }, { "device_sigma_V", 0 }, { "alpha", 0 },
        { "power", 0 },
    };
    const yn *f[5];
    sl_plan_resolve *r = &v->p->resolve;
    if (!v->at[K_RESOLVE] || read_map(v->c, v->at[K_RESOLVE], "resolve", fields, 5, f) != 0)
        return;
    r->present = 1;
    if (f[0] && f[1])
        sl__plan_error(v->c, f[1], "give 'shift_per_cm2' or 'shift_V' in resolve, not both");
    else if (!f[0] && !f[1])
        sl__plan_error(v->c, v->at[K_RESOLVE], "missing required key 'shift_per_cm2' in resolve");
    v->shift_at = f[0] ? f[0] : f[1];
    if (f[0])
        read_number(v->c, f[0], "shift_per_cm2", NUM_POSITIVE, &r->shift_per_cm2);
    else if (f[1])
        read_number(v->c, f[1], "shift_V", NUM_POSITIVE, &r->shift_V);
    if (f[2])
        read_number(v->c, f[2], "device_sigma_V", NUM_POSITIVE, &r->device_sigma_V);
    read_number_or(v->c, f[3], "alpha", NUM_PROBABILITY, 0.05, &r->alpha);
    read_number_or(v->c, f[4], "power", NUM_PROBABILITY, 0.9, &r->power);
}

static void read_variation(conv *v)
{
    static const field fields[] = {
        { "wafer_sigma_per_cm2", 1 }, { "device_sigma_V", 1 }, { "batch_sigma_per_cm2", 0 },
    };
    const yn *f[3];
    sl_plan_variation *var = &v->p->variation;
    const yn *node = v->at[K_VARIATION];
    if (!node) {
        const yn *at = v->at[K_RESOLVE] ? v->at[K_RESOLVE] : v->root;
        sl__plan_warning(v->c, at, "no 'variation' block: whether the lot is big enough is unknown "
                               "(give wafer_sigma_per_cm2 and device_sigma_V)");
        return;
    }
    if (read_map(v->c, node, "variation", fields, 3, f) != 0)
        return;
    var->present = 1;
    if (f[0])
        read_number(v->c, f[0], "wafer_sigma_per_cm2", NUM_NONNEG, &var->wafer_sigma_per_cm2);
    if (f[1])
        read_number(v->c, f[1], "device_sigma_V", NUM_NONNEG, &var->device_sigma_V);
    read_number_or(v->c, f[2], "batch_sigma_per_cm2", NUM_NONNEG, 0.0,
                   &var->batch_sigma_per_cm2);
    v->batch_sigma_at = f[2];
    if (f[0] && f[1] && var->wafer_sigma_per_cm2 == 0.0 && var->device_sigma_V == 0.0)
        sl__plan_warning(v->c, node, "wafer_sigma_per_cm2 and device_sigma_V are both 0: a wafer "
                                 "mean would have no scatter, so no power can be computed");
}

/* A batched step names a treatment or a dielectric of the plan. */
static void batch_step(conv *v, const yn *name, sl_plan_batch *b)
{
    sl_plan *p = v->p;
    long t = find_named(p->treatments, p->n_treatments, sizeof *p->treatments, name->text);
    long d = find_named(p->dielectrics, p->n_dielectrics, sizeof *p->dielectrics, name->text);
    if (t < 0 && d < 0) {
        size_t n = p->n_treatments + p->n_dielectrics;
        const char **names = sl__plan_calloc(v->c, n, sizeof *names);
        for (size_t i = 0; names && i < n; i++)
            names[i] = i < p->n_treatments
                           ? name_at(p->treatments, sizeof *p->treatments, i)
                           : name_at(p->dielectrics, sizeof *p->dielectrics, i - p->n_treatments);
        if (names)
            unknown_name(v->c, name, "step (a treatment or dielectric)", names, n);
        free(names);
        return;
    }
    b->is_dielectric = t < 0;
    b->ref = (size_t)(t < 0 ? d : t);
    if (sl_plan_batch_of(p, b->is_dielectric, b->ref))
        sl__plan_error(v->c, name, "step '%s' is batched twice", name->text);
    else
        b->step = sl__plan_strdup(v->c, name->text);
}

static void read_batches(conv *v)
{
    static const field fields[] = { { "step", 1 }, { "capacity", 1 } };
    sl_plan *p = v->p;
    const yn *node = v->at[K_BATCHES];
    if (!node) {
        if (v->batch_sigma_at && p->variation.batch_sigma_per_cm2 > 0.0)
            sl__plan_warning(v->c, v->batch_sigma_at,
                         "batch_sigma_per_cm2 is not used: the plan has no batches");
        return;
    }
    if (read_list(v->c, node, "batches", MAX_LIST) != 0)
        return;
    p->batches = sl__plan_calloc(v->c, node->n_items, sizeof *p->batches);
    for (size_t i = 0; p->batches && i < node->n_items && !v->c->nomem; i++) {
        const yn *f[2];
        sl_plan_batch b = { 0 };
        if (read_map(v->c, node->items[i], "batch", fields, 2, f) != 0 || !f[0] || !f[1] ||
            want_kind(v->c, f[0], YN_SCALAR, "step") != 0)
            continue;
        batch_step(v, f[0], &b);
        if (read_whole(v->c, f[1], "capacity", 1, MAX_WAFERS, &b.capacity) != 0 || !b.step) {
            free(b.step);
            continue;
        }
        p->batches[p->n_batches++] = b;
    }
    if (p->variation.present && !v->batch_sigma_at)
        sl__plan_warning(v->c, v->at[K_VARIATION],
                     "batches without variation.batch_sigma_per_cm2: no load-to-load scatter "
                     "is assumed");
}

static int leap_year(long y)
{
    return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

/* processed: a calendar date YYYY-MM-DD. */
static void read_processed(conv *v)
{
    static const int days[] = { 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31 };
    const yn *node = v->at[K_PROCESSED];
    if (!node || want_kind(v->c, node, YN_SCALAR, "processed") != 0)
        return;
    long y = 0, m = 0, d = 0;
    int used = 0;
    const char *t = node->text;
    int ok = strlen(t) == 10 && sscanf(t, "%4ld-%2ld-%2ld%n", &y, &m, &d, &used) == 3 &&
             used == 10 && t[4] == '-' && t[7] == '-' && y >= 1900 && m >= 1 && m <= 12 &&
             d >= 1 && d <= days[m - 1] + (m == 2 && leap_year(y));
    if (!ok)
        sl__plan_error(v->c, node, "'processed' must be a date YYYY-MM-DD, got '%s'", t);
    else
        v->p->processed = sl__plan_strdup(v->c, t);
}

/* ---- physics warnings, on a plan without errors ---- */

typedef struct {
    double cg_F_per_m2, rel_sigma, safe_V;
} stack_info;

static int stack_of(const sl_plan *p, size_t d, stack_info *out)
{
    sl_layer layers[MAX_LAYERS];
    size_t n = 0;
    if (sl_plan_stack(p, d, layers, MAX_LAYERS, &n) != SL_OK || n == 0)
        return -1;
    out->cg_F_per_m2 = sl_physics_stack_capacitance_F_per_m2(layers, n);
    out->rel_sigma = sl_physics_stack_capacitance_rel_sigma(layers, n);
    out->safe_V = sl_physics_stack_safe_gate_V(layers, n, p->gate_derating);
    return out->cg_F_per_m2 > 0.0 ? 0 : -1;
}

static void warn_gate_ranges(conv *v)
{
    const sl_plan *p = v->p;
    for (size_t d = 0; d < p->n_dielectrics; d++) {
        stack_info s;
        const sl_plan_dielectric *di = &p->dielectrics[d];
        if (!di->has_gate_range || stack_of(p, d, &s) != 0)
            continue;
        if (-di->gate_range_V[0] > s.safe_V || di->gate_range_V[1] > s.safe_V)
            sl__plan_warning(v->c, v->gate_range_at[d],
                         "gate_range_V [%g, %g] of '%s' goes beyond +/-%.3g V, where the field "
                         "reaches half the breakdown field of the stack",
                         di->gate_range_V[0], di->gate_range_V[1], di->name, s.safe_V);
    }
}

static void warn_cnp_outside(conv *v)
{
    const sl_plan *p = v->p;
    for (size_t i = 0; i < p->n_splits; i++) {
        stack_info s;
        const sl_plan_split *sp = &p->splits[i];
        const sl_plan_dielectric *d = &p->dielectrics[sp->dielectric];
        if (stack_of(p, sp->dielectric, &s) != 0)
            continue;
        sl_est n = sl_plan_split_doping_per_cm2(p, i);
        sl_est n_m2 = { n.val * SL_PER_M2_PER_PER_CM2, n.sigma * SL_PER_M2_PER_PER_CM2 };
        sl_est cnp = sl_physics_cnp_V(n_m2, s.cg_F_per_m2, s.rel_sigma);
        double lo = d->has_gate_range ? d->gate_range_V[0] : -s.safe_V;
        double hi = d->has_gate_range ? d->gate_range_V[1] : s.safe_V;
        if (cnp.val < lo || cnp.val > hi)
            sl__plan_warning(v->c, v->split_at[i],
                         "split '%s': predicted neutrality point %.3g V lies outside the gate "
                         "range [%.3g, %.3g] V",
                         sp->name, cnp.val, lo, hi);
    }
}

static void warn_thermal_floor(conv *v)
{
    const sl_plan *p = v->p;
    if (!p->resolve.present || !v->shift_at || p->n_temperatures == 0)
        return;
    double t_max = p->temperatures_K[0];
    for (size_t i = 1; i < p->n_temperatures; i++)
        t_max = p->temperatures_K[i] > t_max ? p->temperatures_K[i] : t_max;
    double n_th = sl_physics_thermal_floor_per_m2(t_max, p->fermi_velocity_m_s);
    if (p->resolve.shift_per_cm2 > 0.0) {
        if (p->resolve.shift_per_cm2 * SL_PER_M2_PER_PER_CM2 < n_th)
            sl__plan_warning(v->c, v->shift_at,
                         "shift_per_cm2 %g is below the thermal floor at %g K, %.3g cm^-2",
                         p->resolve.shift_per_cm2, t_max, n_th / SL_PER_M2_PER_PER_CM2);
        return;
    }
    for (size_t d = 0; d < p->factors[0].n_levels; d++) {
        stack_info s;
        size_t di = (size_t)p->factors[0].level_ref[d];
        if (stack_of(p, di, &s) != 0)
            continue;
        double floor_V = SL_SI_ELEMENTARY_CHARGE * n_th / s.cg_F_per_m2;
        if (p->resolve.shift_V < floor_V)
            sl__plan_warning(v->c, v->shift_at,
                         "shift_V %g V is below the thermal floor of '%s' at %g K, %.3g V in "
                         "gate voltage",
                         p->resolve.shift_V, p->dielectrics[di].name, t_max, floor_V);
    }
}

/* A level judged against a tolerance of 0 (no `tolerance` and doping sigma
 * 0, or no doping block at all): no interval lies inside it, so the level
 * can never be 'as-planned'. Located at the dielectric or treatment. */
static void warn_zero_tolerance(conv *v)
{
    const sl_plan *p = v->p;
    for (size_t f = 0; f < p->n_factors; f++)
        for (size_t l = 1; l < p->factors[f].n_levels; l++) {
            long ref = p->factors[f].level_ref[l];
            if (ref < 0 || sl_plan_level_tolerance_per_cm2(p, f, l) > 0.0)
                continue;
            const yn *list = v->at[f == 0 ? K_DIELECTRICS : K_TREATMENTS];
            const yn *at = list && (size_t)ref < list->n_items ? list->items[ref] : list;
            sl__plan_warning(v->c, at,
                             "%s '%s' has doping sigma 0 and no tolerance: its level is judged "
                             "against a tolerance of 0 and can never be 'as-planned'; give "
                             "doping_per_cm2 a sigma or a tolerance",
                             f == 0 ? "dielectric" : "treatment", p->factors[f].levels[l]);
        }
}

/* ---- the whole plan ---- */

void sl__plan_convert(plan_ctx *c, const yn *root)
{
    conv v = { .c = c, .p = c->plan, .root = root };
    if (read_map(c, root, "the plan", root_fields, K_COUNT, v.at) == 0) {
        read_scalars(&v);
        read_materials(&v);
        read_dielectrics(&v);
        read_treatments(&v);
        read_wafers(&v);
        read_design(&v);
        check_wafer_count(&v);
        read_resolve(&v);
        read_variation(&v);
        read_batches(&v);
        read_processed(&v);
        if (c->n_errors == 0 && !c->nomem) {
            warn_gate_ranges(&v);
            warn_cnp_outside(&v);
            warn_thermal_floor(&v);
            warn_zero_tolerance(&v);
        }
    }
    free(v.gate_range_at);
    free(v.split_at);
}
