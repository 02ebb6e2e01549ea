/* SPDX-License-Identifier: MIT
 * Plan loading: the file read under a size cap, libyaml events turned into a
 * node tree with caps on nesting and alias expansion (hostile input is refused
 * with one located error), the plan's lifetime and its small accessors.
 * The meaning of the keys and the checks live in plan_validate.c.
 */
#include "plan_internal.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <yaml.h>

/* ---- messages and allocation shared with plan_validate.c ---- */

static void add_message(plan_ctx *c, sl_severity sev, const yn *at, const char *fmt, va_list ap)
{
    char text[1024];
    vsnprintf(text, sizeof text, fmt, ap);
    sl_diag_add(c->diag, sev, c->file, at ? at->line : 0, at ? at->col : 0, "%s", text);
}

void sl__plan_error(plan_ctx *c, const yn *at, const char *fmt, ...)
{
    c->n_errors++;
    if (c->n_errors > SL_PLAN_MAX_ERRORS)
        return;
    va_list ap;
    va_start(ap, fmt);
    if (c->n_errors == SL_PLAN_MAX_ERRORS)
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, at ? at->line : 0, at ? at->col : 0,
                    "too many errors, the rest are not shown");
    else
        add_message(c, SL_SEV_ERROR, at, fmt, ap);
    va_end(ap);
}

void sl__plan_warning(plan_ctx *c, const yn *at, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    add_message(c, SL_SEV_WARNING, at, fmt, ap);
    va_end(ap);
}

char *sl__plan_strdup(plan_ctx *c, const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (!d) {
        c->nomem = 1;
        return NULL;
    }
    memcpy(d, s, n);
    return d;
}

void *sl__plan_calloc(plan_ctx *c, size_t n, size_t size)
{
    void *p = calloc(n ? n : 1, size);
    if (!p)
        c->nomem = 1;
    return p;
}

/* ---- the node tree ---- */

typedef struct {
    char *name;
    yn *node;
} anchor;

typedef struct {
    plan_ctx *c;
    yn *arena;                 /* every node, for freeing */
    yn *stack[SL_PLAN_MAX_DEPTH + 1];
    size_t depth;
    yn *root;
    anchor *anchors;
    size_t n_anchors, cap_anchors;
    size_t expanded;           /* nodes with aliases expanded, so far */
    int documents;
    int failed;                /* stop reading: hostile or broken input */
} tree;

static void tree_free(tree *t)
{
    for (yn *n = t->arena, *next; n; n = next) {
        next = n->next_alloc;
        free(n->text);
        free(n->items);
        free(n);
    }
    for (size_t i = 0; i < t->n_anchors; i++)
        free(t->anchors[i].name);
    free(t->anchors);
}

static yn *new_node(tree *t, yn_kind kind, yaml_mark_t mark)
{
    yn *n = calloc(1, sizeof *n);
    if (!n) {
        t->c->nomem = 1;
        return NULL;
    }
    n->kind = kind;
    n->line = (long)mark.line + 1; /* libyaml marks are 0-based */
    n->col = (long)mark.column + 1;
    n->weight = 1;
    n->next_alloc = t->arena;
    t->arena = n;
    return n;
}

static int attach(tree *t, yn *child)
{
    if (t->depth == 0) {
        t->root = child;
        return 0;
    }
    yn *parent = t->stack[t->depth - 1];
    if (parent->n_items == parent->cap_items) {
        size_t cap = parent->cap_items ? 2 * parent->cap_items : 8;
        yn **items = realloc(parent->items, cap * sizeof *items);
        if (!items) {
            t->c->nomem = 1;
            return -1;
        }
        parent->items = items;
        parent->cap_items = cap;
    }
    parent->items[parent->n_items++] = child;
    return 0;
}

static int add_anchor(tree *t, const yaml_char_t *name, yn *node)
{
    if (!name)
        return 0;
    if (t->n_anchors == t->cap_anchors) {
        size_t cap = t->cap_anchors ? 2 * t->cap_anchors : 8;
        anchor *a = realloc(t->anchors, cap * sizeof *a);
        if (!a) {
            t->c->nomem = 1;
            return -1;
        }
        t->anchors = a;
        t->cap_anchors = cap;
    }
    char *copy = sl__plan_strdup(t->c, (const char *)name);
    if (!copy)
        return -1;
    t->anchors[t->n_anchors].name = copy;
    t->anchors[t->n_anchors].node = node;
    t->n_anchors++;
    return 0;
}

/* The latest definition wins, as YAML says anchors may be redefined. */
static yn *find_anchor(const tree *t, const char *name)
{
    for (size_t i = t->n_anchors; i-- > 0;)
        if (strcmp(t->anchors[i].name, name) == 0)
            return t->anchors[i].node;
    return NULL;
}

static void refuse(tree *t, yaml_mark_t mark, const char *fmt, const char *token)
{
    yn where = { .line = (long)mark.line + 1, .col = (long)mark.column + 1 };
    sl__plan_error(t->c, &where, fmt, token);
    t->failed = 1;
}

static int count_nodes(tree *t, size_t weight, yaml_mark_t mark, const char *token)
{
    t->expanded += weight;
    if (t->expanded > SL_PLAN_MAX_NODES) {
        refuse(t, mark, token[0] == '*' ? "alias '%s' expands the plan beyond 200000 nodes"
                                        : "the plan has more than 200000 nodes at '%s'",
               token);
        return -1;
    }
    return 0;
}

static int on_scalar(tree *t, const yaml_event_t *e)
{
    yn *n = new_node(t, YN_SCALAR, e->start_mark);
    if (!n || attach(t, n) != 0)
        return -1;
    n->text = sl__plan_strdup(t->c, (const char *)e->data.scalar.value);
    n->quoted = e->data.scalar.style != YAML_PLAIN_SCALAR_STYLE;
    if (!n->text || add_anchor(t, e->data.scalar.anchor, n) != 0)
        return -1;
    return count_nodes(t, 1, e->start_mark, n->text);
}

static int on_collection_start(tree *t, const yaml_event_t *e, yn_kind kind)
{
    if (t->depth >= SL_PLAN_MAX_DEPTH) {
        refuse(t, e->start_mark, "the plan nests deeper than 32 levels%s", "");
        return -1;
    }
    yn *n = new_node(t, kind, e->start_mark);
    if (!n || attach(t, n) != 0)
        return -1;
    const yaml_char_t *name = kind == YN_SEQ ? e->data.sequence_start.anchor
                                             : e->data.mapping_start.anchor;
    n->open = 1;
    if (add_anchor(t, name, n) != 0)
        return -1;
    t->stack[t->depth++] = n;
    return count_nodes(t, 1, e->start_mark, kind == YN_SEQ ? "[" : "{");
}

static void on_collection_end(tree *t)
{
    yn *n = t->stack[--t->depth];
    n->open = 0;
    for (size_t i = 0; i < n->n_items; i++)
        n->weight += n->items[i]->weight;
}

static int on_alias(tree *t, const yaml_event_t *e)
{
    const char *name = (const char *)e->data.alias.anchor;
    char token[96];
    snprintf(token, sizeof token, "*%s", name);
    yn *target = find_anchor(t, name);
    if (!target) {
        refuse(t, e->start_mark, "alias '%s' names no anchor defined before it", token);
        return -1;
    }
    if (target->open) {
        refuse(t, e->start_mark, "alias '%s' refers to a node that contains it", token);
        return -1;
    }
    if (count_nodes(t, target->weight, e->start_mark, token) != 0)
        return -1;
    return attach(t, target);
}

static int on_event(tree *t, const yaml_event_t *e)
{
    switch (e->type) {
    case YAML_DOCUMENT_START_EVENT:
        if (++t->documents > 1) {
            refuse(t, e->start_mark, "a plan is one YAML document, found a second '%s'", "---");
            return -1;
        }
        return 0;
    case YAML_SCALAR_EVENT: return on_scalar(t, e);
    case YAML_SEQUENCE_START_EVENT: return on_collection_start(t, e, YN_SEQ);
    case YAML_MAPPING_START_EVENT: return on_collection_start(t, e, YN_MAP);
    case YAML_SEQUENCE_END_EVENT:
    case YAML_MAPPING_END_EVENT: on_collection_end(t); return 0;
    case YAML_ALIAS_EVENT: return on_alias(t, e);
    default: return 0;
    }
}

static void syntax_error(tree *t, const yaml_parser_t *p)
{
    char msg[512];
    if (p->context)
        snprintf(msg, sizeof msg, "yaml syntax: %s (%s started at %zu:%zu)",
                 p->problem ? p->problem : "error", p->context, p->context_mark.line + 1,
                 p->context_mark.column + 1);
    else
        snprintf(msg, sizeof msg, "yaml syntax: %s", p->problem ? p->problem : "error");
    yaml_mark_t mark = p->problem ? p->problem_mark : p->mark;
    if (p->error == YAML_MEMORY_ERROR)
        t->c->nomem = 1;
    refuse(t, mark, "%s", msg);
}

/* Read the whole text into a tree; on failure the context holds the message. */
static void build_tree(tree *t, const char *text, size_t len)
{
    yaml_parser_t parser;
    if (!yaml_parser_initialize(&parser)) {
        t->c->nomem = 1;
        return;
    }
    yaml_parser_set_input_string(&parser, (const unsigned char *)text, len);
    for (int done = 0; !done && !t->failed && !t->c->nomem;) {
        yaml_event_t e;
        if (!yaml_parser_parse(&parser, &e)) {
            syntax_error(t, &parser);
            break;
        }
        done = e.type == YAML_STREAM_END_EVENT;
        if (on_event(t, &e) != 0)
            t->failed = 1;
        yaml_event_delete(&e);
    }
    yaml_parser_delete(&parser);
}

/* ---- loading ---- */

static void free_dielectrics(sl_plan *plan)
{
    for (size_t i = 0; i < plan->n_dielectrics; i++) {
        for (size_t j = 0; j < plan->dielectrics[i].n_layers; j++)
            free(plan->dielectrics[i].layers[j].material);
        free(plan->dielectrics[i].layers);
        free(plan->dielectrics[i].name);
    }
    free(plan->dielectrics);
}

static void free_factors(sl_plan *plan)
{
    for (size_t i = 0; i < plan->n_factors; i++) {
        for (size_t j = 0; j < plan->factors[i].n_levels; j++)
            free(plan->factors[i].levels[j]);
        free(plan->factors[i].levels);
        free(plan->factors[i].level_ref);
        free(plan->factors[i].name);
    }
    free(plan->factors);
}

static void free_splits(sl_plan *plan)
{
    for (size_t i = 0; i < plan->n_splits; i++) {
        for (size_t j = 0; j < plan->splits[i].n_wafers; j++)
            free(plan->splits[i].wafers[j]);
        free(plan->splits[i].wafers);
        free(plan->splits[i].treatments);
        free(plan->splits[i].levels);
        free(plan->splits[i].name);
    }
    free(plan->splits);
}

void sl_plan_free(sl_plan *plan)
{
    if (!plan)
        return;
    for (size_t i = 0; i < plan->n_materials; i++)
        free(plan->materials[i].name);
    for (size_t i = 0; i < plan->n_treatments; i++)
        free(plan->treatments[i].name);
    for (size_t i = 0; i < plan->n_wafers; i++)
        free(plan->wafers[i]);
    for (size_t i = 0; i < plan->n_device_types; i++)
        free(plan->device_types[i].name);
    free(plan->device_types);
    free_dielectrics(plan);
    free_factors(plan);
    free_splits(plan);
    for (size_t i = 0; i < plan->n_batches; i++)
        free(plan->batches[i].step);
    for (size_t i = 0; i < plan->n_generators; i++)
        free(plan->generators[i].of);
    free(plan->batches);
    free(plan->generators);
    free(plan->processed);
    free(plan->wafers);
    free(plan->treatments);
    free(plan->materials);
    free(plan->temperatures_K);
    free(plan->lot);
    free(plan->title);
    free(plan->text);
    free(plan->path);
    free(plan);
}

long sl_plan_device_type_index(const sl_plan *plan, const char *name)
{
    for (size_t i = 0; i < plan->n_device_types; i++)
        if (strcmp(plan->device_types[i].name, name) == 0)
            return (long)i;
    return -1;
}

static sl_status finish(plan_ctx *c, sl_plan **out)
{
    if (c->nomem) {
        sl_diag_error(c->diag, "out of memory while reading plan '%s'", c->file);
        sl_plan_free(c->plan);
        return SL_ENOMEM;
    }
    if (c->n_errors > 0) {
        sl_plan_free(c->plan);
        return SL_EINPUT;
    }
    *out = c->plan;
    return SL_OK;
}

static void read_text(plan_ctx *c, const char *text, size_t len)
{
    tree t = { .c = c };
    build_tree(&t, text, len);
    if (!t.failed && !c->nomem) {
        if (!t.root) {
            yn start = { .line = 1, .col = 1 };
            sl__plan_error(c, &start, "the plan is empty");
        } else {
            sl__plan_convert(c, t.root);
        }
    }
    tree_free(&t);
}

sl_status sl_plan_parse(sl_plan **out, const char *text, size_t len, const char *name,
                        sl_diag *diag)
{
    *out = NULL;
    plan_ctx c = { .diag = diag, .file = name ? name : "plan" };
    if (len > SL_PLAN_MAX_BYTES) {
        sl_diag_add(diag, SL_SEV_ERROR, c.file, 0, 0,
                    "the file is larger than the 1 MiB a plan may have (%zu bytes)", len);
        return SL_EINPUT;
    }
    c.plan = sl__plan_calloc(&c, 1, sizeof *c.plan);
    if (c.plan) {
        c.plan->path = sl__plan_strdup(&c, c.file);
        c.plan->text = sl__plan_calloc(&c, len + 1, 1);
        if (c.plan->text) {
            memcpy(c.plan->text, text, len);
            c.plan->text_len = len;
        }
    }
    if (!c.nomem)
        read_text(&c, text, len);
    return finish(&c, out);
}

sl_status sl_plan_load(sl_plan **out, const char *path, sl_diag *diag)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f) {
        sl_diag_add(diag, SL_SEV_ERROR, path, 0, 0, "cannot open the plan");
        return SL_EIO;
    }
    size_t cap = SL_PLAN_MAX_BYTES + 1; /* one byte more tells an oversized file */
    char *buf = malloc(cap);
    if (!buf) {
        fclose(f);
        return SL_ENOMEM;
    }
    size_t len = fread(buf, 1, cap, f);
    int bad = ferror(f);
    fclose(f);
    if (bad) {
        free(buf);
        sl_diag_add(diag, SL_SEV_ERROR, path, 0, 0, "cannot read the plan");
        return SL_EIO;
    }
    sl_status st = sl_plan_parse(out, buf, len, path, diag);
    free(buf);
    return st;
}

/* ---- accessors ---- */

const sl_plan_material *sl_plan_material_find(const sl_plan *plan, const char *name)
{
    for (size_t i = 0; plan && name && i < plan->n_materials; i++)
        if (strcmp(plan->materials[i].name, name) == 0)
            return &plan->materials[i];
    return NULL;
}

sl_status sl_plan_stack(const sl_plan *plan, size_t dielectric, sl_layer *out, size_t max,
                        size_t *count)
{
    *count = 0;
    if (dielectric >= plan->n_dielectrics || plan->dielectrics[dielectric].n_layers > max)
        return SL_EINPUT;
    const sl_plan_dielectric *d = &plan->dielectrics[dielectric];
    for (size_t i = 0; i < d->n_layers; i++) {
        const sl_plan_material *m = sl_plan_material_find(plan, d->layers[i].material);
        if (!m)
            return SL_EINPUT;
        out[i].relative_permittivity = m->relative_permittivity;
        out[i].thickness_m = d->layers[i].thickness_nm * SL_M_PER_NM;
        out[i].thickness_sigma_m = d->layers[i].sigma_nm * SL_M_PER_NM;
        out[i].breakdown_V_per_m = m->breakdown_MV_per_cm * SL_V_PER_M_PER_MV_CM;
    }
    *count = d->n_layers;
    return SL_OK;
}

double sl_plan_level_tolerance_per_cm2(const sl_plan *plan, size_t factor, size_t level)
{
    long ref = plan->factors[factor].level_ref[level];
    if (factor == 0) {
        const sl_plan_dielectric *d = &plan->dielectrics[ref];
        return isnan(d->doping_tolerance_per_cm2) ? d->doping_per_cm2.sigma
                                                  : d->doping_tolerance_per_cm2;
    }
    if (ref < 0)
        return 0.0;
    const sl_plan_treatment *t = &plan->treatments[ref];
    return isnan(t->doping_tolerance_per_cm2) ? t->doping_per_cm2.sigma
                                              : t->doping_tolerance_per_cm2;
}

sl_est sl_plan_split_doping_per_cm2(const sl_plan *plan, size_t split)
{
    const sl_plan_split *s = &plan->splits[split];
    const sl_est *parts[2] = { &plan->baseline_doping_per_cm2,
                               &plan->dielectrics[s->dielectric].doping_per_cm2 };
    double val = parts[0]->val + parts[1]->val;
    double var = parts[0]->sigma * parts[0]->sigma + parts[1]->sigma * parts[1]->sigma;
    for (size_t i = 0; i < s->n_treatments; i++) {
        const sl_est *t = &plan->treatments[s->treatments[i]].doping_per_cm2;
        val += t->val;
        var += t->sigma * t->sigma;
    }
    return (sl_est){ val, sqrt(var) };
}

long sl_plan_split_index(const sl_plan *plan, const char *name)
{
    for (size_t i = 0; name && i < plan->n_splits; i++)
        if (strcmp(plan->splits[i].name, name) == 0)
            return (long)i;
    return -1;
}

long sl_plan_wafer_index(const sl_plan *plan, const char *wafer)
{
    for (size_t i = 0; wafer && i < plan->n_wafers; i++)
        if (strcmp(plan->wafers[i], wafer) == 0)
            return (long)i;
    return -1;
}

const sl_plan_batch *sl_plan_batch_of(const sl_plan *plan, int is_dielectric, size_t ref)
{
    for (size_t i = 0; i < plan->n_batches; i++)
        if (plan->batches[i].is_dielectric == is_dielectric && plan->batches[i].ref == ref)
            return &plan->batches[i];
    return NULL;
}

void sl_plan_hash_hex(const sl_plan *plan, char out[17])
{
    uint64_t h = 14695981039346656037ULL; /* FNV-1a 64-bit offset basis */
    for (size_t i = 0; i < plan->text_len; i++) {
        h ^= (unsigned char)plan->text[i];
        h *= 1099511628211ULL; /* FNV-1a 64-bit prime */
    }
    snprintf(out, 17, "%016llx", (unsigned long long)h);
}
