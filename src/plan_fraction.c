/* SPDX-License-Identifier: MIT
 * Fractional factorial designs: the defining relation of a plan's generators,
 * its resolution and the alias chains of main effects and two-factor
 * interactions, on factor bit masks (multiplying effects of two-level factors
 * is the symmetric difference of their factor sets). No statistics here.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/plan.h"

#define MAX_ALIAS_ORDER 3 /* aliases listed up to three-factor interactions */

static int popcount(unsigned long x)
{
    int n = 0;
    for (; x; x &= x - 1)
        n++;
    return n;
}

sl_status sl_plan_fraction_info(sl_plan_fraction *out, const sl_plan *plan)
{
    memset(out, 0, sizeof *out);
    if (plan->n_generators > SL_PLAN_MAX_GENERATORS)
        return SL_EINPUT;
    unsigned long gen[SL_PLAN_MAX_GENERATORS];
    for (size_t g = 0; g < plan->n_generators; g++) {
        gen[g] = 1ul << plan->generators[g].factor;
        for (size_t j = 0; j < plan->generators[g].n_of; j++)
            gen[g] |= 1ul << plan->generators[g].of[j];
    }
    /* every non-empty product of generator words */
    for (unsigned long subset = 1; subset < (1ul << plan->n_generators); subset++) {
        unsigned long w = 0;
        for (size_t g = 0; g < plan->n_generators; g++)
            if (subset >> g & 1ul)
                w ^= gen[g];
        out->words[out->n_words++] = w;
        int len = popcount(w);
        if (out->resolution == 0 || len < out->resolution)
            out->resolution = len;
    }
    return SL_OK;
}

size_t sl_plan_effect_name(char *buf, size_t size, const sl_plan *plan, unsigned long mask)
{
    size_t len = 0;
    if (size)
        buf[0] = '\0';
    if (mask == 0)
        return (size_t)snprintf(buf, size, "I");
    for (size_t f = 0; f < plan->n_factors; f++) {
        if (!(mask >> f & 1ul))
            continue;
        int k = snprintf(len < size ? buf + len : NULL, len < size ? size - len : 0, "%s%s",
                         len ? "*" : "", plan->factors[f].name);
        len += k > 0 ? (size_t)k : 0;
    }
    return len;
}

static int by_order(const void *a, const void *b)
{
    unsigned long x = *(const unsigned long *)a, y = *(const unsigned long *)b;
    int px = popcount(x), py = popcount(y);
    if (px != py)
        return px - py;
    /* lower factors first: compare bit-reversed order by lowest set bit */
    for (unsigned long bit = 1; bit; bit <<= 1)
        if ((x & bit) != (y & bit))
            return (x & bit) ? -1 : 1;
    return 0;
}

/* "effect = alias = alias", the aliases of up to MAX_ALIAS_ORDER factors. */
static char *chain_text(const sl_plan *plan, unsigned long effect, const unsigned long *aliases,
                        size_t n)
{
    size_t need = sl_plan_effect_name(NULL, 0, plan, effect) + 1;
    for (size_t i = 0; i < n; i++)
        need += sl_plan_effect_name(NULL, 0, plan, aliases[i]) + 3;
    char *text = malloc(need);
    if (!text)
        return NULL;
    size_t len = sl_plan_effect_name(text, need, plan, effect);
    for (size_t i = 0; i < n; i++) {
        memcpy(text + len, " = ", 4);
        len += 3;
        len += sl_plan_effect_name(text + len, need - len, plan, aliases[i]);
    }
    return text;
}

/* Effects of order 1 and 2 in the order they are listed. */
static size_t low_order_effects(unsigned long *out, size_t nf)
{
    size_t n = 0;
    for (size_t i = 0; i < nf; i++)
        out[n++] = 1ul << i;
    for (size_t i = 0; i < nf; i++)
        for (size_t j = i + 1; j < nf; j++)
            out[n++] = (1ul << i) | (1ul << j);
    return n;
}

static int already_listed(const unsigned long *listed, size_t n, unsigned long effect)
{
    for (size_t i = 0; i < n; i++)
        if (listed[i] == effect)
            return 1;
    return 0;
}

sl_status sl_plan_fraction_aliases(char ***out, size_t *n, int *main_with_2fi,
                                   const sl_plan *plan)
{
    *out = NULL;
    *n = 0;
    *main_with_2fi = 0;
    sl_plan_fraction fr;
    if (sl_plan_fraction_info(&fr, plan) != SL_OK)
        return SL_EINPUT;
    if (fr.n_words == 0)
        return SL_OK;
    size_t nf = plan->n_factors;
    size_t n_effects = nf + nf * (nf - 1) / 2;
    unsigned long *effects = malloc(n_effects * sizeof *effects);
    unsigned long *listed = malloc(n_effects * (fr.n_words + 1) * sizeof *listed);
    unsigned long *chain = malloc(fr.n_words * sizeof *chain);
    char **lines = calloc(n_effects, sizeof *lines);
    sl_status st = (effects && listed && chain && lines) ? SL_OK : SL_ENOMEM;
    size_t n_listed = 0;
    if (st == SL_OK)
        low_order_effects(effects, nf);
    for (size_t e = 0; st == SL_OK && e < n_effects; e++) {
        if (already_listed(listed, n_listed, effects[e]))
            continue;
        size_t k = 0;
        for (size_t w = 0; w < fr.n_words; w++) {
            unsigned long alias = effects[e] ^ fr.words[w];
            listed[n_listed++] = alias;
            if (popcount(alias) <= MAX_ALIAS_ORDER)
                chain[k++] = alias;
            if (popcount(effects[e]) == 1 && popcount(alias) == 2)
                *main_with_2fi = 1;
        }
        listed[n_listed++] = effects[e];
        if (k == 0)
            continue;
        qsort(chain, k, sizeof *chain, by_order);
        lines[*n] = chain_text(plan, effects[e], chain, k);
        if (!lines[*n])
            st = SL_ENOMEM;
        else
            (*n)++;
    }
    free(effects);
    free(listed);
    free(chain);
    if (st != SL_OK) {
        for (size_t i = 0; lines && i < *n; i++)
            free(lines[i]);
        free(lines);
        *n = 0;
        return st;
    }
    *out = lines;
    return SL_OK;
}
