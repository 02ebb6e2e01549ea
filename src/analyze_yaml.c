/* SPDX-License-Identifier: MIT
 * Calibrated plan YAML from the history across lots: the random-effects
 * pooled doping of every measured level with sigma sqrt(tau^2 + SE^2),
 * turned back into absolute values with the newest plan's reference levels,
 * as baseline, materials, dielectrics and treatments blocks, and the
 * measured wafer and device scatter as a `variation` block, to be pasted
 * into the next plan. Each level keeps its plan's tolerance; a level pooled
 * from fewer than two lots keeps its plan's sigma as a floor (see
 * docs/statistics.md).
 */
#include <ctype.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze_internal.h"

static const sl_history_level *history_level(const sl_history *h, const char *factor,
                                             const char *level, const char *reference)
{
    for (size_t i = 0; i < h->n_levels; i++) {
        const sl_history_level *l = &h->levels[i];
        if (strcmp(l->factor, factor) == 0 && strcmp(l->level, level) == 0 &&
            strcmp(l->reference, reference) == 0 && isfinite(l->pooled.value))
            return l;
    }
    return NULL;
}

/* Fewest lots whose pool gives the between-lot sigma. */
#define EMIT_MIN_LOTS 2

/* What a lot of this level will deliver: sigma = sqrt(tau^2 + SE^2), tau
 * the between-lot sigma. From one lot tau is unknown and the lot's SE alone
 * says nothing of how the next lot scatters, so the plan's sigma stays as a
 * floor: max(planned sigma, SE). */
static double calibrated_sigma(const sl_history_level *l, double planned_sigma)
{
    if (l->pooled.k < EMIT_MIN_LOTS)
        return fmax(fabs(planned_sigma), l->pooled.se);
    double tau = isfinite(l->pooled.tau) ? l->pooled.tau : 0.0;
    return sqrt(tau * tau + l->pooled.se * l->pooled.se);
}

/* The note of a calibrated value, "" when nothing needs saying. */
static const char *calibrated_note(const sl_history_level *l)
{
    return l->pooled.k < EMIT_MIN_LOTS
               ? "   # one lot: between-lot scatter unknown, the plan's sigma kept as a floor"
               : "";
}

/* Calibrated absolute doping of a factor's level; planned when unmeasured
 * (*from NULL). */
static sl_est calibrated(const sl_history *h, size_t factor, size_t level,
                         const sl_history_level **from)
{
    const sl_plan *p = h->newest_plan;
    const sl_plan_factor *f = &p->factors[factor];
    sl_est planned = sl__analyze_planned_level(p, factor, level);
    *from = NULL;
    if (level == 0)
        return planned;
    const sl_history_level *l = history_level(h, f->name, f->levels[level], f->levels[0]);
    if (!l)
        return planned;
    *from = l;
    return (sl_est){ sl__analyze_planned_level(p, factor, 0).val + l->pooled.value,
                     calibrated_sigma(l, planned.sigma) };
}

/* A name as a YAML scalar: plain when it is made of letters, digits and
 * "_-." only (and starts with a letter or digit), else double-quoted with
 * escapes, so that names with ", ", ": ", " #" or quotes, which a plan may
 * hold in quotes, come back as the same text. */
static void emit_name(FILE *out, const char *name)
{
    int plain = isalnum((unsigned char)name[0]);
    for (const char *s = name; plain && *s; s++)
        plain = isalnum((unsigned char)*s) || strchr("_-.", *s);
    if (plain) {
        fputs(name, out);
        return;
    }
    fputc('"', out);
    for (const unsigned char *s = (const unsigned char *)name; *s; s++) {
        if (*s == '"' || *s == '\\')
            fprintf(out, "\\%c", *s);
        else if (*s < 0x20 || *s == 0x7f)
            fprintf(out, "\\x%02x", *s);
        else
            fputc(*s, out);
    }
    fputc('"', out);
}

static void emit_doping(FILE *out, sl_est v)
{
    fprintf(out, "{ mean: %.4g, sigma: %.4g }", v.val, fabs(v.sigma));
}

/* A level's doping with the tolerance its plan judged it by (the plan's
 * `tolerance`, else its planned sigma), so a calibrated sigma does not
 * silently become the next plan's tolerance. */
static void emit_level_doping(FILE *out, sl_est v, double tolerance, sl_est planned)
{
    fprintf(out, "{ mean: %.4g, sigma: %.4g, tolerance: %.4g }", v.val, fabs(v.sigma),
            isnan(tolerance) ? fabs(planned.sigma) : tolerance);
}

static void emit_baseline(FILE *out, const sl_history *h)
{
    const sl_plan *p = h->newest_plan;
    char name[256];
    sl__analyze_intercept_name(name, sizeof name, p, NULL, 0); /* every factor's level 0 */
    const sl_history_level *l = history_level(h, "intercept", name, p->factors[0].levels[0]);
    sl_est v = p->baseline_doping_per_cm2;
    if (l) {
        v.val = l->pooled.value;
        for (size_t f = 0; f < p->n_factors; f++)
            v.val -= sl__analyze_planned_level(p, f, 0).val;
        v.sigma = calibrated_sigma(l, p->baseline_doping_per_cm2.sigma);
    }
    fprintf(out, "baseline_doping_per_cm2: ");
    emit_doping(out, v);
    fprintf(out, "%s%s\n", l ? "   # with the reference levels as planned" : "   # not measured: planned value",
            l && l->pooled.k < EMIT_MIN_LOTS ? "; one lot: the plan's sigma kept as a floor" : "");
}

/* The scatter the lots showed, for the next plan's power and analysis. */
static void emit_variation(FILE *out, const sl_history *h)
{
    if (!isfinite(h->wafer_sigma_per_cm2) && !isfinite(h->device_sigma_V))
        return;
    fprintf(out, "variation:   # measured: root mean square over the lots\n");
    if (isfinite(h->wafer_sigma_per_cm2))
        fprintf(out, "  wafer_sigma_per_cm2: %.4g\n", h->wafer_sigma_per_cm2);
    if (isfinite(h->device_sigma_V))
        fprintf(out, "  device_sigma_V: %.4g\n", h->device_sigma_V);
    if (isfinite(h->batch_sigma_per_cm2))
        fprintf(out, "  batch_sigma_per_cm2: %.4g\n", h->batch_sigma_per_cm2);
}

static void emit_materials(FILE *out, const sl_plan *p)
{
    int any = 0;
    for (size_t i = 0; i < p->n_materials; i++) {
        const sl_plan_material *m = &p->materials[i];
        const sl_material *b = sl_physics_material_find(m->name);
        if (b && b->relative_permittivity == m->relative_permittivity &&
            b->breakdown_MV_per_cm == m->breakdown_MV_per_cm)
            continue;
        if (!any++)
            fprintf(out, "materials:\n");
        fputs("  - { name: ", out);
        emit_name(out, m->name);
        fprintf(out, ", relative_permittivity: %.6g, breakdown_MV_per_cm: %.6g }\n",
                m->relative_permittivity, m->breakdown_MV_per_cm);
    }
}

static long level_of(const sl_plan_factor *f, long ref)
{
    for (size_t l = 0; l < f->n_levels; l++)
        if (f->level_ref[l] == ref)
            return (long)l;
    return -1;
}

static void emit_dielectrics(FILE *out, const sl_history *h)
{
    const sl_plan *p = h->newest_plan;
    fprintf(out, "dielectrics:\n");
    for (size_t d = 0; d < p->n_dielectrics; d++) {
        const sl_plan_dielectric *di = &p->dielectrics[d];
        long level = level_of(&p->factors[0], (long)d);
        const sl_history_level *from = NULL;
        sl_est v = level >= 0 ? calibrated(h, 0, (size_t)level, &from) : di->doping_per_cm2;
        fputs("  - name: ", out);
        emit_name(out, di->name);
        fputs("\n    layers:\n", out);
        for (size_t i = 0; i < di->n_layers; i++) {
            fputs("      - { material: ", out);
            emit_name(out, di->layers[i].material);
            fprintf(out, ", thickness_nm: %.6g, sigma_nm: %.6g }\n", di->layers[i].thickness_nm,
                    di->layers[i].sigma_nm);
        }
        fprintf(out, "    doping_per_cm2: ");
        emit_level_doping(out, v, di->doping_tolerance_per_cm2, di->doping_per_cm2);
        fprintf(out, "%s\n", from ? calibrated_note(from)
                                  : level == 0 ? "   # reference level: planned value"
                                               : "   # not measured: planned value");
        if (di->has_gate_range)
            fprintf(out, "    gate_range_V: [%.6g, %.6g]\n", di->gate_range_V[0], di->gate_range_V[1]);
    }
}

static void emit_treatments(FILE *out, const sl_history *h)
{
    const sl_plan *p = h->newest_plan;
    if (p->n_treatments == 0)
        return;
    fprintf(out, "treatments:\n");
    for (size_t t = 0; t < p->n_treatments; t++) {
        const sl_plan_treatment *tr = &p->treatments[t];
        sl_est v = tr->doping_per_cm2;
        const sl_history_level *from = NULL;
        for (size_t f = 1; f < p->n_factors && !from; f++) {
            long level = level_of(&p->factors[f], (long)t);
            if (level >= 0)
                v = calibrated(h, f, (size_t)level, &from);
        }
        fputs("  - { name: ", out);
        emit_name(out, tr->name);
        fputs(", doping_per_cm2: ", out);
        emit_level_doping(out, v, tr->doping_tolerance_per_cm2, tr->doping_per_cm2);
        fprintf(out, " }%s\n", from ? calibrated_note(from) : "   # not measured: planned value");
    }
}

sl_status sl_history_emit_yaml(char **yaml, const sl_history *h)
{
    *yaml = NULL;
    if (!h->newest_plan)
        return SL_ENOTFOUND;
    size_t size = 0;
    FILE *out = open_memstream(yaml, &size);
    if (!out)
        return SL_ENOMEM;
    fprintf(out, "# Calibrated doping from %zu lot(s) with effect estimates; means are\n"
                 "# random-effects pooled (DerSimonian and Laird) over the lots that did\n"
                 "# not drift, sigmas sqrt(between-lot sigma^2 + pooled SE^2) (from one\n"
                 "# lot: the plan's sigma kept as a floor), tolerances the plan's. Paste\n"
                 "# over the same keys of the next plan.\n",
            h->n_lots);
    emit_baseline(out, h);
    emit_materials(out, h->newest_plan);
    emit_dielectrics(out, h);
    emit_treatments(out, h);
    emit_variation(out, h);
    return fclose(out) == 0 && *yaml ? SL_OK : SL_ENOMEM;
}
