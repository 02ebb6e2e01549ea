/* SPDX-License-Identifier: MIT
 * The planner's answer per level: from the design matrix of the wafer (and
 * load) assignment and the plan's variation block, the standard error of
 * each level's effect, its df, the power of an off-plan verdict for a miss
 * of tolerance + shift, and the wafers per split that would give the plan's
 * power. The statistics themselves are in stats_power.c.
 */
#include "splitlot/layout.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/physics.h"
#include "splitlot/stats.h"
#include "splitlot/units.h"

#define MAX_STACK_LAYERS 32

/* ---- plan quantities ---- */

/* C_g / e of a dielectric's planned stack, cm^-2 per volt; NaN if unknown. */
static double per_cm2_per_V(const sl_plan *plan, size_t dielectric)
{
    sl_layer layers[MAX_STACK_LAYERS];
    size_t n = 0;
    if (sl_plan_stack(plan, dielectric, layers, MAX_STACK_LAYERS, &n) != SL_OK || n == 0)
        return NAN;
    return sl_physics_stack_capacitance_F_per_m2(layers, n) / SL_SI_ELEMENTARY_CHARGE *
           SL_PER_CM2_PER_PER_M2;
}

/* The shift in cm^-2: as given, or shift_V at the smallest C_g / e among the
 * splits at the level (the hardest of them to resolve). */
static double level_shift_per_cm2(const sl_plan *plan, size_t factor, size_t level)
{
    if (plan->resolve.shift_per_cm2 > 0.0)
        return plan->resolve.shift_per_cm2;
    double least = INFINITY;
    for (size_t s = 0; s < plan->n_splits; s++)
        if (plan->splits[s].levels[factor] == level)
            least = fmin(least, per_cm2_per_V(plan, plan->splits[s].dielectric));
    return plan->resolve.shift_V * least;
}

/* ---- the model of a set of wafers ---- */

void sl_layout_model_free(sl_layout_model *m)
{
    free(m->x);
    free(m->var);
    free(m->load);
    free(m->per_cm2_per_V);
    free(m->wafer);
    free(m->coef_factor);
    free(m->coef_level);
    memset(m, 0, sizeof *m);
}

/* Rows: a split per wafer, and per batch its 1-based load (0: skips it). */
typedef struct {
    size_t n;
    size_t *split;
    size_t *load;            /* n x n_batches */
    size_t *loads_per_batch; /* n_batches */
} rows;

static void rows_free(rows *r)
{
    free(r->split);
    free(r->load);
    free(r->loads_per_batch);
}

static sl_status rows_alloc(rows *r, size_t n, size_t n_batches)
{
    r->n = n;
    r->split = calloc(n + 1, sizeof *r->split);
    r->load = calloc(n * n_batches + 1, sizeof *r->load);
    r->loads_per_batch = calloc(n_batches + 1, sizeof *r->loads_per_batch);
    return r->split && r->load && r->loads_per_batch ? SL_OK : SL_ENOMEM;
}

static sl_status model_design(sl_layout_model *m, const sl_plan *plan, const rows *r)
{
    size_t nf = plan->n_factors;
    size_t *levels = malloc((r->n * nf + 1) * sizeof *levels);
    size_t *n_levels = malloc((nf + 1) * sizeof *n_levels);
    sl_stats_design *d = NULL;
    sl_status st = levels && n_levels ? SL_OK : SL_ENOMEM;
    for (size_t i = 0; st == SL_OK && i < r->n; i++)
        memcpy(levels + i * nf, plan->splits[r->split[i]].levels, nf * sizeof *levels);
    for (size_t f = 0; st == SL_OK && f < nf; f++)
        n_levels[f] = plan->factors[f].n_levels;
    if (st == SL_OK)
        st = sl_stats_design_treatment(&d, levels, r->n, nf, n_levels, NULL);
    if (st == SL_OK) {
        m->n_coef = d->n_coef;
        m->x = d->x; /* taken over */
        d->x = NULL;
        m->coef_factor = malloc(d->n_coef * sizeof *m->coef_factor);
        m->coef_level = malloc(d->n_coef * sizeof *m->coef_level);
        st = m->coef_factor && m->coef_level ? SL_OK : SL_ENOMEM;
        for (size_t c = 0; st == SL_OK && c < d->n_coef; c++) {
            m->coef_factor[c] = d->columns[c].factor;
            m->coef_level[c] = d->columns[c].level;
        }
    }
    sl_stats_design_free(d);
    free(levels);
    free(n_levels);
    return st;
}

static sl_status model_from_rows(sl_layout_model *m, const sl_plan *plan, const rows *r,
                                 double devices)
{
    memset(m, 0, sizeof *m);
    const sl_plan_variation *v = &plan->variation;
    size_t nb = plan->n_batches, L = 0;
    for (size_t b = 0; b < nb; b++)
        L += r->loads_per_batch[b];
    m->n_obs = r->n;
    m->n_loads = L;
    m->n_steps = nb;
    m->wafer_var = v->wafer_sigma_per_cm2 * v->wafer_sigma_per_cm2;
    m->device_var_V2 = v->device_sigma_V * v->device_sigma_V;
    m->load_var = v->batch_sigma_per_cm2 * v->batch_sigma_per_cm2;
    m->devices = devices;
    m->var = malloc((r->n + 1) * sizeof *m->var);
    m->per_cm2_per_V = malloc((r->n + 1) * sizeof *m->per_cm2_per_V);
    m->load = malloc((r->n * nb + 1) * sizeof *m->load);
    m->wafer = calloc(r->n + 1, sizeof *m->wafer);
    if (!m->var || !m->per_cm2_per_V || !m->load || !m->wafer)
        return SL_ENOMEM;
    for (size_t i = 0; i < r->n; i++) {
        double c = per_cm2_per_V(plan, plan->splits[r->split[i]].dielectric);
        m->per_cm2_per_V[i] = c;
        m->var[i] = m->wafer_var + (isinf(devices) ? 0.0 : m->device_var_V2 * c * c / devices);
        for (size_t b = 0, offset = 0; b < nb; offset += r->loads_per_batch[b++])
            m->load[i * nb + b] =
                r->load[i * nb + b] > 0 ? (long)(offset + r->load[i * nb + b] - 1) : -1;
    }
    return model_design(m, plan, r);
}

static sl_status rows_of_layout(rows *r, const sl_plan *plan, const sl_layout *l)
{
    size_t n = 0, nb = plan->n_batches;
    for (size_t i = 0; i < l->n_wafers; i++)
        n += l->wafers[i].split >= 0;
    if (rows_alloc(r, n, nb) != SL_OK)
        return SL_ENOMEM;
    for (size_t k = 0; k < l->n_loads; k++)
        r->loads_per_batch[l->loads[k].batch]++;
    for (size_t i = 0, row = 0; i < l->n_wafers; i++) {
        if (l->wafers[i].split < 0)
            continue;
        r->split[row] = (size_t)l->wafers[i].split;
        for (size_t b = 0; b < nb; b++)
            r->load[row * nb + b] = l->wafers[i].load[b];
        row++;
    }
    return SL_OK;
}

sl_status sl_layout_model_build(sl_layout_model *out, const sl_plan *plan, const sl_layout *layout,
                                double devices_per_wafer)
{
    memset(out, 0, sizeof *out);
    if (!plan->variation.present)
        return SL_EINPUT;
    rows r = { 0 };
    sl_status st = rows_of_layout(&r, plan, layout);
    if (st == SL_OK)
        st = model_from_rows(out, plan, &r, devices_per_wafer * plan->expected_yield);
    for (size_t i = 0, row = 0; st == SL_OK && i < layout->n_wafers; i++)
        if (layout->wafers[i].split >= 0)
            out->wafer[row++] = i;
    rows_free(&r);
    if (st != SL_OK)
        sl_layout_model_free(out);
    return st;
}

/* A balanced lot of w wafers per split; each batched step's wafers dealt
 * split by split round-robin into its loads. */
static sl_status rows_balanced(rows *r, const sl_plan *plan, size_t w)
{
    size_t nb = plan->n_batches;
    if (rows_alloc(r, plan->n_splits * w, nb) != SL_OK)
        return SL_ENOMEM;
    for (size_t i = 0; i < r->n; i++)
        r->split[i] = i / w;
    for (size_t b = 0; b < nb; b++) {
        const sl_plan_batch *batch = &plan->batches[b];
        size_t n = 0;
        for (size_t i = 0; i < r->n; i++) {
            const sl_plan_split *s = &plan->splits[r->split[i]];
            int gets = batch->is_dielectric ? s->dielectric == batch->ref : 0;
            for (size_t t = 0; !batch->is_dielectric && t < s->n_treatments; t++)
                gets |= s->treatments[t] == batch->ref;
            r->load[i * nb + b] = gets ? ++n : 0; /* numbered in order, mapped below */
        }
        size_t loads = (n + (size_t)batch->capacity - 1) / (size_t)batch->capacity;
        r->loads_per_batch[b] = loads;
        for (size_t i = 0; i < r->n; i++)
            if (r->load[i * nb + b] > 0)
                r->load[i * nb + b] = (r->load[i * nb + b] - 1) % loads + 1;
    }
    return SL_OK;
}

/* ---- power of every level of a model ---- */

typedef struct {
    double *cov, *df;
    size_t p;
} level_stats;

static sl_status model_stats(level_stats *s, const sl_layout_model *m)
{
    s->p = m->n_coef;
    s->cov = malloc(m->n_coef * m->n_coef * sizeof *s->cov);
    s->df = malloc(m->n_coef * sizeof *s->df);
    if (!s->cov || !s->df)
        return SL_ENOMEM;
    sl_stats_gls_model g = { m->n_obs,  m->n_coef, m->n_loads,  m->n_steps,
                             m->x,      m->var,    m->n_loads ? m->load : NULL, m->load_var };
    sl_stats_coef_df(s->df, &g);
    return sl_stats_gls_cov(s->cov, &g);
}

static void level_stats_free(level_stats *s)
{
    free(s->cov);
    free(s->df);
}

static double column_power(const level_stats *s, size_t c, const sl_layout_level *lv,
                           double alpha)
{
    double se = sqrt(s->cov[c * s->p + c]);
    return sl_stats_offplan_power(se, s->df[c], lv->tolerance_per_cm2, lv->shift_per_cm2, alpha);
}

/* Models of balanced lots already worked out: the searches of every level
 * ask for the same few (wafers per split, devices) pairs. */
#define CACHE_MAX 32

typedef struct {
    size_t w;
    double devices;
    level_stats s;
    sl_status status;
} cache_entry;

typedef struct {
    const sl_plan *plan;
    cache_entry e[CACHE_MAX];
    size_t n, next;          /* entries in use; the one to replace next */
    level_stats unlimited;   /* today's layout with unlimited devices */
    sl_status unlimited_status;
    int has_unlimited;
} power_cache;

static void cache_free(power_cache *pc)
{
    for (size_t i = 0; i < pc->n; i++)
        level_stats_free(&pc->e[i].s);
    level_stats_free(&pc->unlimited);
}

static cache_entry *balanced_stats(power_cache *pc, size_t w, double devices)
{
    for (size_t i = 0; i < pc->n; i++)
        if (pc->e[i].w == w && pc->e[i].devices == devices)
            return &pc->e[i];
    cache_entry *e = &pc->e[pc->n < CACHE_MAX ? pc->n++ : pc->next];
    pc->next = (size_t)(e - pc->e + 1) % CACHE_MAX;
    level_stats_free(&e->s);
    *e = (cache_entry){ .w = w, .devices = devices };
    rows r = { 0 };
    sl_layout_model m = { 0 };
    e->status = rows_balanced(&r, pc->plan, w);
    if (e->status == SL_OK)
        e->status = model_from_rows(&m, pc->plan, &r, devices);
    if (e->status == SL_OK)
        e->status = model_stats(&e->s, &m);
    sl_layout_model_free(&m);
    rows_free(&r);
    return e;
}

/* Power of column c in a balanced lot of w wafers per split with devices
 * usable devices per wafer; NaN on failure. Without batches the covariance
 * of w wafers per split is that of one wafer per split over w. */
static double balanced_power(power_cache *pc, size_t w, double devices, size_t c,
                             const sl_layout_level *lv)
{
    const sl_plan *plan = pc->plan;
    double alpha = plan->resolve.alpha;
    if (plan->n_batches > 0) {
        cache_entry *e = balanced_stats(pc, w, devices);
        return e->status == SL_OK ? column_power(&e->s, c, lv, alpha) : NAN;
    }
    cache_entry *e = balanced_stats(pc, 1, devices);
    if (e->status != SL_OK)
        return NAN;
    double se = sqrt(e->s.cov[c * e->s.p + c] / (double)w);
    double df = (double)(plan->n_splits * w) - (double)e->s.p;
    return sl_stats_offplan_power(se, df, lv->tolerance_per_cm2, lv->shift_per_cm2, alpha);
}

/* Smallest w in 1..max with power >= target (power grows with w): doubling,
 * then bisection. */
static long wafers_needed(power_cache *pc, double devices, size_t c, const sl_layout_level *lv)
{
    double target = pc->plan->resolve.power;
    long max = SL_LAYOUT_MAX_WAFERS / (long)(pc->plan->n_splits ? pc->plan->n_splits : 1), w = 1;
    max = max < SL_LAYOUT_MAX_WAFERS_PER_SPLIT ? max : SL_LAYOUT_MAX_WAFERS_PER_SPLIT;
    if (max < 1)
        return -1;
    while (w < max && !(balanced_power(pc, (size_t)w, devices, c, lv) >= target))
        w *= 2;
    if (w >= max) {
        w = max;
        if (!(balanced_power(pc, (size_t)w, devices, c, lv) >= target))
            return -1;
    }
    long lo = w / 2 + 1, hi = w;
    while (lo < hi) {
        long mid = lo + (hi - lo) / 2;
        if (balanced_power(pc, (size_t)mid, devices, c, lv) >= target)
            hi = mid;
        else
            lo = mid + 1;
    }
    return hi;
}

/* At w wafers per split, the fewest devices per wafer keeping the power. */
static long devices_enough(power_cache *pc, size_t w, size_t c, const sl_layout_level *lv)
{
    const sl_plan *plan = pc->plan;
    long lo = 1, hi = plan->devices_per_wafer;
    double y = plan->expected_yield;
    if (!(balanced_power(pc, w, (double)hi * y, c, lv) >= plan->resolve.power))
        return 0;
    while (lo < hi) {
        long mid = lo + (hi - lo) / 2;
        if (balanced_power(pc, w, (double)mid * y, c, lv) >= plan->resolve.power)
            hi = mid;
        else
            lo = mid + 1;
    }
    return lo;
}

static size_t wafers_at(const sl_layout_model *m, size_t c)
{
    size_t n = 0;
    for (size_t i = 0; i < m->n_obs; i++)
        n += m->x[i * m->n_coef + c] != 0.0;
    return n;
}

static size_t loads_at(const sl_layout_model *m, size_t c)
{
    unsigned char *carries = calloc(m->n_loads + 1, 1);
    size_t n = 0;
    for (size_t i = 0; carries && i < m->n_obs; i++)
        for (size_t s = 0; s < m->n_steps; s++) {
            long k = m->load[i * m->n_steps + s];
            if (k >= 0 && m->x[i * m->n_coef + c] != 0.0 && !carries[k]) {
                carries[k] = 1;
                n++;
            }
        }
    free(carries);
    return n;
}

/* Today's layout with unlimited devices per wafer, worked out once. */
static const level_stats *unlimited_stats(power_cache *pc, const sl_layout *l)
{
    if (!pc->has_unlimited) {
        sl_layout_model m = { 0 };
        pc->has_unlimited = 1;
        pc->unlimited_status = sl_layout_model_build(&m, pc->plan, l, INFINITY);
        if (pc->unlimited_status == SL_OK)
            pc->unlimited_status = model_stats(&pc->unlimited, &m);
        sl_layout_model_free(&m);
    }
    return pc->unlimited_status == SL_OK ? &pc->unlimited : NULL;
}

static void judge_level(sl_layout_level *lv, power_cache *pc, const sl_layout *l,
                        const sl_layout_model *m, const level_stats *s, size_t c)
{
    const sl_plan *plan = pc->plan;
    double alpha = plan->resolve.alpha;
    lv->effect_se_per_cm2 = sqrt(s->cov[c * s->p + c]);
    lv->df = s->df[c];
    if (!plan->resolve.present)
        return;
    lv->power = column_power(s, c, lv, alpha);
    lv->false_rate = sl_stats_offplan_false_rate(lv->effect_se_per_cm2, lv->df,
                                                 lv->tolerance_per_cm2, alpha);
    lv->verdict = lv->power >= plan->resolve.power ? SL_LAYOUT_ENOUGH : SL_LAYOUT_TOO_FEW;
    lv->wafers_per_split_needed = wafers_needed(pc, m->devices, c, lv);
    if (lv->verdict == SL_LAYOUT_ENOUGH)
        return;
    /* what would help: devices without limit at today's wafers, or more wafers */
    const level_stats *inf = unlimited_stats(pc, l);
    if (inf)
        lv->devices_cannot_help = !(column_power(inf, c, lv, alpha) >= plan->resolve.power);
    if (lv->wafers_per_split_needed > 0)
        lv->devices_per_wafer_enough =
            devices_enough(pc, (size_t)lv->wafers_per_split_needed, c, lv);
}

static sl_status list_levels(sl_layout *l, const sl_plan *plan)
{
    size_t n = 0;
    for (size_t f = 0; f < plan->n_factors; f++)
        n += plan->factors[f].n_levels - 1;
    l->levels = calloc(n + 1, sizeof *l->levels);
    if (!l->levels)
        return SL_ENOMEM;
    for (size_t f = 0; f < plan->n_factors; f++)
        for (size_t k = 1; k < plan->factors[f].n_levels; k++) {
            sl_layout_level *lv = &l->levels[l->n_levels++];
            lv->factor = f;
            lv->level = k;
            lv->tolerance_per_cm2 = sl_plan_level_tolerance_per_cm2(plan, f, k);
            lv->shift_per_cm2 = plan->resolve.present ? level_shift_per_cm2(plan, f, k) : NAN;
            lv->effect_se_per_cm2 = lv->df = lv->power = lv->false_rate = NAN;
            for (size_t s = 0; s < l->n_splits; s++)
                lv->wafers += plan->splits[s].levels[f] == k ? l->splits[s].n_wafers : 0;
        }
    return SL_OK;
}

sl_status sl_layout_power(sl_layout *l, const sl_plan *plan)
{
    sl_status st = list_levels(l, plan);
    const sl_plan_variation *v = &plan->variation;
    /* without wafer-level scatter nothing is uncertain: no power to compute */
    if (st != SL_OK || !v->present || (v->wafer_sigma_per_cm2 == 0.0 && v->device_sigma_V == 0.0))
        return st;
    sl_layout_model m = { 0 };
    level_stats s = { 0 };
    power_cache *pc = calloc(1, sizeof *pc);
    if (!pc)
        return SL_ENOMEM;
    pc->plan = plan;
    st = sl_layout_model_build(&m, plan, l, (double)plan->devices_per_wafer);
    if (st == SL_OK)
        st = model_stats(&s, &m);
    if (st == SL_EINPUT) { /* a model out of reach (too many loads): power unknown */
        st = SL_OK;
        m.n_coef = 0;
    }
    for (size_t c = 1; st == SL_OK && c < m.n_coef; c++) {
        for (size_t k = 0; k < l->n_levels; k++) {
            sl_layout_level *lv = &l->levels[k];
            if (lv->factor != m.coef_factor[c] || lv->level != m.coef_level[c])
                continue;
            lv->loads = loads_at(&m, c);
            lv->wafers = wafers_at(&m, c);
            judge_level(lv, pc, l, &m, &s, c);
        }
    }
    cache_free(pc);
    free(pc);
    level_stats_free(&s);
    sl_layout_model_free(&m);
    return st;
}
