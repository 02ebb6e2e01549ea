/* SPDX-License-Identifier: MIT
 * Private to the plan module: the YAML node tree built by plan.c from libyaml
 * events (with the guards against hostile input) and the context in which
 * plan_validate.c turns that tree into an sl_plan. Not a public interface.
 */
#ifndef SL_PLAN_INTERNAL_H
#define SL_PLAN_INTERNAL_H

#include <stddef.h>

#include "splitlot/plan.h"

typedef enum { YN_SCALAR, YN_SEQ, YN_MAP } yn_kind;

/* One YAML node. Aliases share the node they refer to, so the tree is a DAG;
 * every node is owned by the arena list (next_alloc) of its tree. */
typedef struct yn {
    yn_kind kind;
    long line, col;     /* 1-based position of the node's start */
    char *text;         /* scalar text ("" for other kinds) */
    int quoted;         /* scalar written in quotes or as a block: always text */
    int open;           /* collection still being read (alias to it = cycle) */
    struct yn **items;  /* sequence items; mapping: key, value, key, value, ... */
    size_t n_items, cap_items;
    size_t weight;      /* nodes in the subtree with aliases expanded */
    struct yn *next_alloc;
} yn;

/* State shared while a plan is read: where messages go and whether memory ran
 * out. Errors beyond a cap are counted but not stored (a hostile plan could
 * otherwise produce one message per node). */
typedef struct {
    sl_plan *plan;
    sl_diag *diag;
    const char *file;
    size_t n_errors;
    int nomem;
} plan_ctx;

#define SL_PLAN_MAX_BYTES ((size_t)1 << 20) /* 1 MiB: far above any real plan */
#define SL_PLAN_MAX_DEPTH 32                /* real plans nest 5 deep */
#define SL_PLAN_MAX_NODES 200000            /* nodes with aliases expanded */
#define SL_PLAN_MAX_ERRORS 100

void sl__plan_error(plan_ctx *c, const yn *at, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
void sl__plan_warning(plan_ctx *c, const yn *at, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;

/* Duplicate a string, noting an allocation failure in the context. */
char *sl__plan_strdup(plan_ctx *c, const char *s);
/* calloc that notes a failure in the context; n may be 0. */
void *sl__plan_calloc(plan_ctx *c, size_t n, size_t size);

/* Fill c->plan from the root node: every value, every check, every warning. */
void sl__plan_convert(plan_ctx *c, const yn *root);

#endif
