/* SPDX-License-Identifier: MIT
 * Import of measurements (see include/splitlot/ingest.h): set-up against
 * what the store holds of the lot (its plan revision's wafers, splits and
 * gate capacitances; the measurement runs, one per temperature), the checks
 * every row gets, device results, and the one transaction around it all.
 * Sweeps are in ingest_sweeps.c.
 */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <unistd.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "ingest_internal.h"
#include "splitlot/text.h"

double sl__ingest_now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void error_at_v(const ingest_ctx *c, sl_diag *diag, long line, long column,
                       const char *fmt, va_list ap)
{
    char text[1024];
    vsnprintf(text, sizeof text, fmt, ap);
    sl_diag_add(diag, SL_SEV_ERROR, c->file, line, column >= 0 ? column + 1 : 0, "%s", text);
}

void sl__ingest_error_at(const ingest_ctx *c, sl_diag *diag, long line, long column,
                     const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    error_at_v(c, diag, line, column, fmt, ap);
    va_end(ap);
}

void sl__ingest_error_at_row(ingest_ctx *c, long column, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    error_at_v(c, c->diag, sl_rowsrc_line(c->src), column, fmt, ap);
    va_end(ap);
}

sl_status sl__ingest_die_moved(const ingest_ctx *c, sl_diag *diag, long line, const char *device,
                           const char *wafer, const long here[2], const sl_store_insert *stored)
{
    if (stored->run_id >= c->first_run_id)
        sl__ingest_error_at(c, diag, line, c->col.die_x,
                        "device '%s' on wafer '%s' is at die (%ld, %ld) here but at (%ld, %ld) on "
                        "line %ld", device, wafer, here[0], here[1], stored->die_x, stored->die_y,
                        stored->source_line);
    else
        sl__ingest_error_at(c, diag, line, c->col.die_x,
                        "device '%s' on wafer '%s' is at die (%ld, %ld) here but lot '%s' has it "
                        "at (%ld, %ld) since measurement run %ld; a device keeps its die",
                        device, wafer, here[0], here[1], c->lot.lot, stored->die_x, stored->die_y,
                        stored->run_id);
    return SL_EINPUT;
}

void sl__ingest_progress(ingest_ctx *c)
{
    if (!c->opt->progress)
        return;
    sl_ingest_progress p = { c->summary->rows, c->summary->devices,
                             sl__ingest_now_s() - c->started_s };
    c->opt->progress(&p, c->opt->progress_ctx);
}

/* ---- set-up: the lot's plan, its stored revision, wafers and runs ---- */

long sl__ingest_wafer_index(const ingest_ctx *c, const char *wafer)
{
    return sl_plan_wafer_index(c->plan, wafer);
}

/* Dies of every plan wafer. */
static size_t die_count(const sl_plan *plan)
{
    return plan->n_wafers * (size_t)plan->wafer_rows * (size_t)plan->wafer_cols;
}

/* Each plan wafer's split and gate capacitance as the store has them. */
static sl_status load_wafers(ingest_ctx *c)
{
    const sl_plan *plan = c->plan;
    const sl_store_revision *rev = &c->revision;
    c->wafers = calloc(plan->n_wafers ? plan->n_wafers : 1, sizeof *c->wafers);
    if (!c->wafers)
        return SL_ENOMEM;
    c->dies = calloc(die_count(plan) ? die_count(plan) : 1, sizeof *c->dies);
    if (!c->dies)
        return SL_ENOMEM;
    for (size_t i = 0; i < plan->n_wafers; i++) {
        ingest_wafer *w = &c->wafers[i];
        size_t k = 0;
        while (k < rev->n_wafers && strcmp(rev->wafers[k].name, plan->wafers[i]) != 0)
            k++;
        if (k == rev->n_wafers) {
            sl_diag_error(c->diag, "lot '%s': wafer '%s' is missing from the stored layout",
                          c->lot.lot, plan->wafers[i]);
            return SL_EDB;
        }
        w->split = rev->wafers[k].split;
        if (w->split < 0)
            continue;
        double cg = rev->predictions[(size_t)w->split * rev->n_temperatures].gate_capacitance_F_per_m2;
        sl_fit_config_default(&w->fit, cg, plan->channel_length_um, plan->channel_width_um);
        w->fit.model = c->opt->fit_model;
    }
    return SL_OK;
}

/* The plan temperature within the tolerance of t, or -1. */
static long match_temperature(const ingest_ctx *c, double t)
{
    for (size_t i = 0; i < c->revision.n_temperatures; i++)
        if (fabs(t - c->revision.temperatures_K[i]) <= SL_INGEST_TEMPERATURE_TOLERANCE_K)
            return (long)i;
    return -1;
}

/* "300, 77 K" into buf. */
static void list_temperatures(char *buf, size_t size, const ingest_ctx *c)
{
    size_t k = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < c->revision.n_temperatures && k < size; i++)
        k += (size_t)snprintf(buf + k, size - k, "%s%g", i ? ", " : "", c->revision.temperatures_K[i]);
    if (k < size)
        snprintf(buf + k, size - k, " K");
}

static sl_status choose_default_temperature(ingest_ctx *c)
{
    if (!isfinite(c->opt->temperature_K) || c->opt->temperature_K == 0.0)
        return SL_OK; /* index 0: the plan's first (options zeroed say 0) */
    long t = match_temperature(c, c->opt->temperature_K);
    if (t < 0) {
        char allowed[256];
        list_temperatures(allowed, sizeof allowed, c);
        sl_diag_error(c->diag, "temperature %g K is not one of lot '%s''s plan temperatures (%s)",
                      c->opt->temperature_K, c->lot.lot, allowed);
        return SL_EINPUT;
    }
    c->default_temperature = (size_t)t;
    return SL_OK;
}

static sl_status load_lot(ingest_ctx *c)
{
    sl_status st = sl_store_find_lot(c->store, &c->lot, c->opt->lot, c->diag);
    if (st != SL_OK)
        return st;
    size_t before = sl_diag_size(c->diag);
    st = sl_plan_parse(&c->plan, c->lot.plan_text, strlen(c->lot.plan_text), c->lot.plan_name,
                       c->diag);
    if (st != SL_OK) {
        sl_diag_error(c->diag, "lot '%s': its stored plan no longer loads", c->opt->lot);
        return SL_EDB;
    }
    sl_diag_truncate(c->diag, before); /* the plan's warnings were shown when it was stored */
    st = sl_store_load_revision(c->store, &c->revision, c->lot.revision_id, c->diag);
    if (st == SL_OK)
        st = choose_default_temperature(c);
    if (st != SL_OK)
        return st;
    size_t nt = c->revision.n_temperatures;
    c->run_ids = calloc(nt, sizeof *c->run_ids);
    c->run_rows = calloc(nt, sizeof *c->run_rows);
    c->run_devices = calloc(nt, sizeof *c->run_devices);
    if (!c->run_ids || !c->run_rows || !c->run_devices)
        return SL_ENOMEM;
    return load_wafers(c);
}

/* ---- columns ---- */

static void map_columns(ingest_ctx *c)
{
    ingest_columns *k = &c->col;
    k->wafer = sl_rowsrc_column(c->src, SL_ROW_WAFER);
    k->device = sl_rowsrc_column(c->src, SL_ROW_DEVICE);
    k->die_x = sl_rowsrc_column(c->src, SL_ROW_DIE_X);
    k->die_y = sl_rowsrc_column(c->src, SL_ROW_DIE_Y);
    k->vg = sl_rowsrc_column(c->src, SL_ROW_VG);
    k->r = sl_rowsrc_column(c->src, SL_ROW_R);
    k->id = sl_rowsrc_column(c->src, SL_ROW_ID);
    k->vd = sl_rowsrc_column(c->src, SL_ROW_VD);
    k->vcnp = sl_rowsrc_column(c->src, SL_ROW_VCNP);
    k->temperature = sl_rowsrc_column(c->src, SL_ROW_TEMPERATURE);
    k->device_type = sl_rowsrc_column(c->src, SL_ROW_DEVICE_TYPE);
    k->length = sl_rowsrc_column(c->src, SL_ROW_LENGTH);
}

#define ROWS_IDENTITY                                                                        \
    (SL_ROW_BIT(SL_ROW_WAFER) | SL_ROW_BIT(SL_ROW_DEVICE) | SL_ROW_BIT(SL_ROW_DIE_X) |       \
     SL_ROW_BIT(SL_ROW_DIE_Y))
#define ROWS_DEVICE                                                                          \
    (SL_ROW_BIT(SL_ROW_TEMPERATURE) | SL_ROW_BIT(SL_ROW_DEVICE_TYPE) |                       \
     SL_ROW_BIT(SL_ROW_LENGTH) | SL_ROW_BIT(SL_ROW_WIDTH))

static sl_status require_columns(ingest_ctx *c)
{
    sl_row_set need = ROWS_IDENTITY, want = ROWS_IDENTITY | ROWS_DEVICE;
    const char *needs;
    if (c->opt->kind == SL_INGEST_SWEEPS) {
        /* r_ohm, or the drain current at a drain bias */
        bool by_current = !sl_rowsrc_has(c->src, SL_ROW_R) &&
                          (sl_rowsrc_has(c->src, SL_ROW_ID) || sl_rowsrc_has(c->src, SL_ROW_VD));
        need |= SL_ROW_BIT(SL_ROW_VG) |
                (by_current ? SL_ROW_BIT(SL_ROW_ID) | SL_ROW_BIT(SL_ROW_VD) : SL_ROW_BIT(SL_ROW_R));
        want |= need | SL_ROW_BIT(SL_ROW_DIRECTION) | SL_ROW_BIT(SL_ROW_COMPLIANCE);
        needs = "a sweeps file needs wafer, device, die_x, die_y, vg_V and r_ohm or id_A with vd_V";
    } else {
        need |= SL_ROW_BIT(SL_ROW_VCNP);
        want |= need | SL_ROW_BIT(SL_ROW_MOBILITY) | SL_ROW_BIT(SL_ROW_N0) |
                SL_ROW_BIT(SL_ROW_R_CONTACT) | SL_ROW_BIT(SL_ROW_HYSTERESIS);
        needs = sl_rowsrc_has(c->src, SL_ROW_VG)
                    ? "a results file needs wafer, device, die_x, die_y, v_cnp_V; this looks like "
                      "a sweeps file: use --sweeps"
                    : "a results file needs wafer, device, die_x, die_y, v_cnp_V";
    }
    if (sl_rowsrc_has(c->src, SL_ROW_LENGTH) != sl_rowsrc_has(c->src, SL_ROW_WIDTH))
        need |= SL_ROW_BIT(SL_ROW_LENGTH) | SL_ROW_BIT(SL_ROW_WIDTH);
    sl_status st = sl_rowsrc_require(c->src, need, want, needs, c->diag);
    map_columns(c);
    c->summary->separator = sl_rowsrc_separator(c->src);
    size_t used = 0;
    for (size_t i = 0; i < sl_rowsrc_unused_count(c->src); i++) {
        int n = snprintf(c->summary->unused_columns + used, sizeof c->summary->unused_columns - used,
                         "%s%s", i ? ", " : "", sl_rowsrc_unused(c->src, i));
        used += n > 0 ? (size_t)n : 0;
        if (used >= sizeof c->summary->unused_columns)
            break;
    }
    return st;
}

/* ---- rows ---- */

static sl_status read_die(ingest_ctx *c, long *out, sl_row_quantity q, long column, long first,
                          long size, const char *axis)
{
    double v;
    sl_status st = sl_rowsrc_number(&v, c->src, q, c->diag);
    if (st != SL_OK)
        return st;
    if (v != floor(v) || v < (double)first || v > (double)(first + size - 1)) {
        sl__ingest_error_at_row(c, column,
                            "%s '%s' is not a die coordinate from %ld to %ld (wafer map %ld x %ld, "
                            "first_die [%ld, %ld])",
                            axis, sl_rowsrc_field(c->src, q, NULL), first, first + size - 1,
                            c->plan->wafer_rows, c->plan->wafer_cols, c->plan->first_die_x,
                            c->plan->first_die_y);
        return SL_EINPUT;
    }
    *out = (long)v;
    return SL_OK;
}

/* 64-bit FNV-1a of a device name (the FNV reference parameters, common
 * practice for a table key) */
static uint64_t name_hash(const char *name)
{
    uint64_t h = 14695981039346656037ull;
    for (const unsigned char *p = (const unsigned char *)name; *p; p++)
        h = (h ^ *p) * 1099511628211ull;
    return h;
}

/* A die holds at most the devices_per_die the plan gives: a device new to
 * a full die is an error at its row. A plan without the key puts no limit
 * (simulate --devices-per-wafer past the map's dies shares dies). */
static sl_status check_die_devices(ingest_ctx *c, const ingest_row *row)
{
    const sl_plan *p = c->plan;
    if (!p->devices_per_die_given)
        return SL_OK;
    size_t at = (row->wafer_index * (size_t)p->wafer_rows +
                 (size_t)(row->die_y - p->first_die_y)) * (size_t)p->wafer_cols +
                (size_t)(row->die_x - p->first_die_x);
    ingest_die *d = &c->dies[at];
    uint64_t h = name_hash(row->device);
    for (uint32_t i = 0; i < d->n; i++)
        if (d->names[i] == h)
            return SL_OK;
    if ((long)d->n >= p->devices_per_die) {
        sl__ingest_error_at_row(c, c->col.device,
                                "device '%s' is one device too many at die (%ld, %ld) of wafer "
                                "'%s': the plan's wafer_map.devices_per_die is %ld",
                                row->device, row->die_x, row->die_y, row->wafer,
                                p->devices_per_die);
        return SL_EINPUT;
    }
    if (d->n == d->cap) {
        uint32_t cap = d->cap ? 2 * d->cap : 4;
        uint64_t *grown = realloc(d->names, cap * sizeof *grown);
        if (!grown)
            return SL_ENOMEM;
        d->names = grown;
        d->cap = cap;
    }
    d->names[d->n++] = h;
    return SL_OK;
}

static sl_status check_wafer(ingest_ctx *c, ingest_row *row)
{
    long w = sl__ingest_wafer_index(c, row->wafer);
    if (w < 0) {
        char hint[96];
        sl__ingest_error_at_row(c, c->col.wafer, "unknown wafer '%s' in lot '%s'%s", row->wafer,
                            c->lot.lot,
                            sl_text_did_you_mean(hint, sizeof hint, row->wafer,
                                                 (const char *const *)c->plan->wafers,
                                                 c->plan->n_wafers));
        return SL_EINPUT;
    }
    if (c->wafers[w].split < 0) {
        sl__ingest_error_at_row(c, c->col.wafer,
                            "wafer '%s' is a spare in the layout of lot '%s': it belongs to no split",
                            row->wafer, c->lot.lot);
        return SL_EINPUT;
    }
    row->wafer_index = (size_t)w;
    return SL_OK;
}

sl_status sl__ingest_optional_number(ingest_ctx *c, double *out, sl_row_quantity q)
{
    return sl_rowsrc_optional(out, c->src, q, c->diag);
}

/* The row's plan temperature: its temperature_K value, or the default. */
static sl_status read_temperature(ingest_ctx *c, ingest_row *row)
{
    double t = NAN;
    row->temperature = c->default_temperature;
    sl_status st = sl__ingest_optional_number(c, &t, SL_ROW_TEMPERATURE);
    if (st != SL_OK || isnan(t))
        return st;
    if (!(t > 0.0)) {
        sl__ingest_error_at_row(c, c->col.temperature, "temperature '%s' is not above 0 K",
                            sl_rowsrc_field(c->src, SL_ROW_TEMPERATURE, NULL));
        return SL_EINPUT;
    }
    long k = match_temperature(c, t);
    if (k < 0) {
        char allowed[256];
        list_temperatures(allowed, sizeof allowed, c);
        sl__ingest_error_at_row(c, c->col.temperature,
                            "temperature '%s' is not one of the plan's temperatures (%s)",
                            sl_rowsrc_field(c->src, SL_ROW_TEMPERATURE, NULL), allowed);
        return SL_EINPUT;
    }
    row->temperature = (size_t)k;
    return SL_OK;
}

/* The device's type (a plan device type) and channel: from device_type,
 * else from channel_length_um and channel_width_um, else the plan's device. */
static sl_status read_geometry(ingest_ctx *c, ingest_row *row)
{
    const sl_plan *p = c->plan;
    row->device_type = -1;
    row->channel_length_um = p->channel_length_um;
    row->channel_width_um = p->channel_width_um;
    size_t len = 0;
    const char *type = sl_rowsrc_field(c->src, SL_ROW_DEVICE_TYPE, &len);
    if (len > 0) {
        sl_status st = sl_rowsrc_text(&type, &len, c->src, SL_ROW_DEVICE_TYPE,
                                      SL_INGEST_MAX_NAME_BYTES, c->diag);
        if (st != SL_OK)
            return st;
        row->device_type = sl_plan_device_type_index(p, type);
        if (row->device_type < 0) {
            const char *names[64];
            for (size_t i = 0; i < p->n_device_types && i < 64; i++)
                names[i] = p->device_types[i].name;
            char hint[96];
            sl__ingest_error_at_row(c, c->col.device_type, "unknown device_type '%s'%s%s", type,
                                p->n_device_types ? "" : " (the plan has no device_types)",
                                sl_text_did_you_mean(hint, sizeof hint, type, names,
                                                     p->n_device_types < 64 ? p->n_device_types
                                                                            : 64));
            return SL_EINPUT;
        }
        row->channel_length_um = p->device_types[row->device_type].channel_length_um;
        row->channel_width_um = p->device_types[row->device_type].channel_width_um;
    }
    double l_um, w_um;
    sl_status st = sl__ingest_optional_number(c, &l_um, SL_ROW_LENGTH);
    if (st == SL_OK)
        st = sl__ingest_optional_number(c, &w_um, SL_ROW_WIDTH);
    if (st != SL_OK || (isnan(l_um) && isnan(w_um)))
        return st;
    if (!(l_um > 0) || !(w_um > 0)) {
        sl__ingest_error_at_row(c, c->col.length, "channel_length_um and channel_width_um must both "
                            "be given and positive, got '%s' and '%s'",
                            sl_rowsrc_field(c->src, SL_ROW_LENGTH, NULL),
                            sl_rowsrc_field(c->src, SL_ROW_WIDTH, NULL));
        return SL_EINPUT;
    }
    row->channel_length_um = l_um;
    row->channel_width_um = w_um;
    return SL_OK;
}

void sl__ingest_device_fit(const ingest_ctx *c, sl_fit_config *cfg, const ingest_row *row)
{
    *cfg = c->wafers[row->wafer_index].fit;
    cfg->length_over_width = row->channel_length_um / row->channel_width_um;
}

void sl__ingest_row_geometry(const ingest_ctx *c, const ingest_row *row, const char **type,
                         double *length_um, double *width_um)
{
    const sl_plan *p = c->plan;
    bool own = row->channel_length_um != p->channel_length_um ||
               row->channel_width_um != p->channel_width_um || row->device_type >= 0;
    *type = row->device_type >= 0 ? p->device_types[row->device_type].name : NULL;
    *length_um = own ? row->channel_length_um : NAN;
    *width_um = own ? row->channel_width_um : NAN;
}

sl_status sl__ingest_read_row(ingest_ctx *c, ingest_row *row)
{
    size_t len;
    sl_status st = sl_rowsrc_text(&row->wafer, &len, c->src, SL_ROW_WAFER,
                                  SL_INGEST_MAX_NAME_BYTES, c->diag);
    if (st == SL_OK)
        st = sl_rowsrc_text(&row->device, &len, c->src, SL_ROW_DEVICE, SL_INGEST_MAX_NAME_BYTES,
                            c->diag);
    if (st == SL_OK && (!*row->wafer || !*row->device)) {
        sl__ingest_error_at_row(c, *row->wafer ? c->col.device : c->col.wafer,
                            "empty %s name", *row->wafer ? "device" : "wafer");
        return SL_EINPUT;
    }
    const sl_plan *p = c->plan;
    if (st == SL_OK)
        st = check_wafer(c, row);
    if (st == SL_OK)
        st = read_die(c, &row->die_x, SL_ROW_DIE_X, c->col.die_x, p->first_die_x, p->wafer_cols,
                      "die_x");
    if (st == SL_OK)
        st = read_die(c, &row->die_y, SL_ROW_DIE_Y, c->col.die_y, p->first_die_y, p->wafer_rows,
                      "die_y");
    if (st == SL_OK)
        st = read_temperature(c, row);
    if (st == SL_OK)
        st = read_geometry(c, row);
    if (st == SL_OK)
        st = check_die_devices(c, row);
    return st;
}

/* ---- problems, and rows of rejected devices ---- */

static void flush_errors(ingest_ctx *c, bool all)
{
    for (size_t i = 0; i < sl_diag_size(c->diag); i++) {
        const sl_diag_msg *m = sl_diag_get(c->diag, i);
        if (m->severity == SL_SEV_ERROR && ++c->n_errors > SL_INGEST_MAX_ERRORS && !all)
            continue;
        sl_diag_add(c->user_diag, m->severity, m->file, m->line, m->col, "%s", m->text);
    }
    sl_diag_clear(c->diag);
}

void sl__ingest_flush_errors(ingest_ctx *c) { flush_errors(c, false); }

sl_status sl__ingest_keep_row(ingest_ctx *c)
{
    if (!c->rejects)
        return SL_OK;
    return sl_rowsrc_format(&c->reject_buf, &c->reject_len, &c->reject_cap, c->src, 1, NULL) == 0
               ? SL_OK
               : SL_ENOMEM;
}

void sl__ingest_forget_kept(ingest_ctx *c) { c->reject_len = 0; }

/* Each line of rows (as the file had them) with the reason as one more
 * field, into the rejects file; the device counted as rejected. */
sl_status sl__ingest_reject_rows(ingest_ctx *c, const char *rows, size_t len, const char *reason)
{
    c->summary->rejected_devices++;
    if (!c->rejects)
        return SL_OK;
    char sep = sl_rowsrc_separator(c->src);
    size_t quoted_cap = 2 * strlen(reason) + 3;
    char *quoted = malloc(quoted_cap);
    if (!quoted)
        return SL_ENOMEM;
    size_t q = 0;
    quoted[q++] = '"';
    for (const char *r = reason; *r; r++) {
        if (*r == '"')
            quoted[q++] = '"';
        quoted[q++] = *r == '\n' || *r == '\r' ? ' ' : *r;
    }
    quoted[q++] = '"';
    int ok = 1;
    for (size_t at = 0; ok && at < len;) {
        const char *nl = memchr(rows + at, '\n', len - at);
        size_t n = nl ? (size_t)(nl - (rows + at)) : len - at;
        ok = fwrite(rows + at, 1, n, c->rejects) == n && fputc(sep, c->rejects) != EOF &&
             fwrite(quoted, 1, q, c->rejects) == q && fputc('\n', c->rejects) != EOF;
        c->summary->rejected_rows += ok;
        at += n + 1;
    }
    free(quoted);
    if (!ok) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->opt->rejects_path, 0, 0, "cannot write the rejects file");
        return SL_EIO;
    }
    return SL_OK;
}

sl_status sl__ingest_reject_kept(ingest_ctx *c, const char *reason)
{
    sl_status st = sl__ingest_reject_rows(c, c->reject_buf, c->reject_len, reason);
    c->reject_len = 0;
    return st;
}

/* The first error message of the current problem, as a reason. */
const char *sl__ingest_current_reason(const ingest_ctx *c)
{
    for (size_t i = 0; i < sl_diag_size(c->diag); i++) {
        const sl_diag_msg *m = sl_diag_get(c->diag, i);
        if (m->severity == SL_SEV_ERROR)
            return m->text;
    }
    return "rejected";
}

/* ---- device results ---- */

/* The store's answer to a row's measurement: a device twice at one
 * temperature in this file, or at another die than stored. */
static sl_status refused_row(ingest_ctx *c, const ingest_row *row, const sl_store_insert *ins)
{
    if (ins->outcome == SL_STORE_IN_RUN) {
        sl__ingest_error_at_row(c, c->col.device,
                            "duplicate device '%s' on wafer '%s' at %g K (first on line %ld)",
                            row->device, row->wafer,
                            c->revision.temperatures_K[row->temperature], ins->source_line);
        return SL_EINPUT;
    }
    const long here[2] = { row->die_x, row->die_y };
    return sl__ingest_die_moved(c, c->diag, sl_rowsrc_line(c->src), row->device, row->wafer, here, ins);
}

/* A results value no device can have (a negative mobility, residual
 * density or contact resistance): reported at its field. */
static sl_status check_physical(ingest_ctx *c, const sl_store_device *dev)
{
    const struct {
        double value;
        sl_row_quantity q;
        const char *what;
    } checks[] = {
        { dev->mobility_cm2_per_Vs, SL_ROW_MOBILITY, "a mobility" },
        { dev->n0_per_cm2, SL_ROW_N0, "a residual carrier density" },
        { dev->r_contact_ohm, SL_ROW_R_CONTACT, "a contact resistance" },
    };
    sl_status st = SL_OK;
    for (size_t i = 0; i < sizeof checks / sizeof checks[0]; i++)
        if (checks[i].value < 0.0) {
            sl__ingest_error_at_row(c, sl_rowsrc_column(c->src, checks[i].q),
                                "'%s' is negative, which %s cannot be",
                                sl_rowsrc_field(c->src, checks[i].q, NULL), checks[i].what);
            st = SL_EINPUT;
        }
    return st;
}

/* A reported neutrality point beyond the gate range the plan stored for
 * the device's split: kept, classed as outside the sweep (the device may be
 * damaged), not scored as a plain outlier. */
static const char *results_class(const ingest_ctx *c, const ingest_row *row, double cnp_V)
{
    if (isnan(cnp_V))
        return "unmeasured";
    long split = c->wafers[row->wafer_index].split;
    if (split < 0)
        return "ok";
    const sl_prediction *p =
        &c->revision.predictions[(size_t)split * c->revision.n_temperatures + row->temperature];
    return cnp_V < p->gate_min_V || cnp_V > p->gate_max_V ? "cnp-outside-sweep" : "ok";
}

static sl_status results_row(ingest_ctx *c)
{
    ingest_row row;
    sl_status st = sl__ingest_read_row(c, &row);
    if (st != SL_OK)
        return st;
    c->run_rows[row.temperature]++;
    sl_store_device dev;
    sl_store_device_init(&dev);
    dev.wafer = row.wafer;
    dev.name = row.device;
    dev.die_x = row.die_x;
    dev.die_y = row.die_y;
    dev.source = "results";
    dev.source_line = sl_rowsrc_line(c->src);
    sl__ingest_row_geometry(c, &row, &dev.device_type, &dev.channel_length_um, &dev.channel_width_um);
    double *numbers[] = { &dev.cnp_V, &dev.mobility_cm2_per_Vs, &dev.n0_per_cm2,
                          &dev.r_contact_ohm, &dev.hysteresis_V };
    const sl_row_quantity quantities[] = { SL_ROW_VCNP, SL_ROW_MOBILITY, SL_ROW_N0,
                                           SL_ROW_R_CONTACT, SL_ROW_HYSTERESIS };
    for (int i = 0; st == SL_OK && i < 5; i++)
        st = sl__ingest_optional_number(c, numbers[i], quantities[i]);
    if (st == SL_OK)
        st = check_physical(c, &dev);
    if (st != SL_OK)
        return st;
    dev.fit_class = results_class(c, &row, dev.cnp_V);
    sl_store_insert ins;
    st = sl_store_insert_measurement(c->store, &ins, c->lot.lot_id, c->run_ids[row.temperature],
                                     &dev, c->diag);
    if (st == SL_OK && ins.outcome != SL_STORE_ADDED)
        st = refused_row(c, &row, &ins);
    c->run_devices[row.temperature] += st == SL_OK;
    c->summary->unmeasured += st == SL_OK && isnan(dev.cnp_V);
    c->summary->devices += st == SL_OK;
    c->summary->hysteresis_flagged += st == SL_OK &&
                                      fabs(dev.hysteresis_V) > c->plan->max_hysteresis_V;
    return st;
}

/* A row with a problem: reported, its device rejected, reading goes on. */
static sl_status results_problem(ingest_ctx *c)
{
    sl_status st = sl__ingest_keep_row(c);
    if (st == SL_OK)
        st = sl__ingest_reject_kept(c, sl__ingest_current_reason(c));
    sl__ingest_flush_errors(c);
    return st;
}

static sl_status ingest_results(ingest_ctx *c)
{
    bool has = false;
    sl_status st;
    while ((st = sl_rowsrc_next(&has, c->src, c->diag)) == SL_OK && has) {
        c->summary->rows++;
        st = results_row(c);
        if (st == SL_EINPUT)
            st = results_problem(c);
        if (st != SL_OK)
            return st;
        if ((c->summary->rows & 0xffff) == 0)
            sl__ingest_progress(c);
    }
    return st;
}

/* ---- the whole import ---- */

/* A run per plan temperature, made before any row is read (the sweeps'
 * writer thread stores into them); the ones no row went to are dropped at
 * the end. */
static sl_status start_runs(ingest_ctx *c)
{
    const char *kind = c->opt->kind == SL_INGEST_SWEEPS ? "sweeps" : "results";
    const char *step = c->opt->step ? c->opt->step : "final";
    if (!*step || strlen(step) > SL_INGEST_MAX_NAME_BYTES) {
        sl_diag_error(c->diag, "step '%.64s' is not a step name (1 to %d bytes)", step,
                      SL_INGEST_MAX_NAME_BYTES);
        return SL_EINPUT;
    }
    sl_status st = sl_store_next_run_id(c->store, &c->first_run_id, c->diag);
    for (size_t t = 0; st == SL_OK && t < c->revision.n_temperatures; t++)
        st = sl_store_add_run(c->store, &c->run_ids[t], c->lot.lot_id, c->lot.revision_id, step,
                              c->revision.temperatures_K[t], kind, c->file, c->diag);
    return st;
}

/* The file's SHA-256, once the hasher has read it all. */
static sl_status finish_hash(ingest_ctx *c)
{
    ingest_hash_result r = sl__ingest_hasher_finish(c->hasher, c->summary->sha256);
    c->hasher = NULL;
    if (c->hash_failed)
        return SL_ENOMEM;
    if (r == INGEST_HASH_READ_FAILED)
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, 0, 0, "read failed (for its SHA-256)");
    if (r == INGEST_HASH_FILE_CHANGED)
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, 0, 0,
                    "the file changed while it was imported; nothing was stored "
                    "(import it again once it is complete)");
    return r == INGEST_HASH_OK ? SL_OK : SL_EIO;
}

static sl_status finish_runs(ingest_ctx *c)
{
    sl_status st = finish_hash(c);
    if (st != SL_OK)
        return st;
    size_t runs_measured = 0;
    for (size_t t = 0; st == SL_OK && t < c->revision.n_temperatures; t++) {
        long devices = c->run_devices[t];
        st = sl_store_finish_run(c->store, c->run_ids[t], c->run_rows[t], devices,
                                 c->summary->sha256, c->diag);
        runs_measured += devices > 0;
        if (st != SL_OK || devices == 0 || c->summary->n_runs >= SL_INGEST_MAX_RUNS)
            continue;
        size_t k = c->summary->n_runs++;
        c->summary->runs[k].run = c->run_ids[t];
        c->summary->runs[k].temperature_K = c->revision.temperatures_K[t];
        c->summary->runs[k].rows = c->run_rows[t];
        c->summary->runs[k].devices = devices;
    }
    /* a device measured at two temperatures is one device, two measurements:
     * only then does the store have to tell them apart */
    c->summary->measurements = c->summary->devices;
    if (st == SL_OK && runs_measured > 1)
        st = sl_store_count_import_devices(c->store, &c->summary->devices, c->lot.lot_id,
                                           c->first_run_id, c->diag);
    return st;
}

static sl_status open_rejects(ingest_ctx *c)
{
    if (!c->opt->keep_going || !c->opt->rejects_path)
        return SL_OK;
    c->rejects = fopen(c->opt->rejects_path, "w");
    if (!c->rejects) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->opt->rejects_path, 0, 0,
                    "cannot open the rejects file for writing");
        return SL_EIO;
    }
    sl_status st = sl_rowsrc_format(&c->reject_buf, &c->reject_len, &c->reject_cap, c->src, 0,
                                    "reason") == 0 ? SL_OK : SL_ENOMEM;
    if (st == SL_OK && fwrite(c->reject_buf, 1, c->reject_len, c->rejects) != c->reject_len)
        st = SL_EIO;
    c->reject_len = 0;
    return st;
}

/* Everything on disk before the store commits: a full disk fails the import. */
static sl_status close_rejects(ingest_ctx *c)
{
    FILE *f = c->rejects;
    c->rejects = NULL;
    int bad = fflush(f) != 0 || ferror(f) || fsync(fileno(f)) != 0;
    bad |= fclose(f) != 0;
    if (!bad)
        return SL_OK;
    sl_diag_add(c->diag, SL_SEV_ERROR, c->opt->rejects_path, 0, 0,
                "cannot write the rejects file; nothing was imported");
    return SL_EIO;
}

static sl_status import_body(ingest_ctx *c)
{
    sl_status st = require_columns(c);
    if (st == SL_OK)
        st = open_rejects(c);
    if (st == SL_OK)
        st = sl_store_begin_lot_inserts(c->store, c->lot.lot_id, c->diag);
    if (st == SL_OK)
        st = start_runs(c);
    if (st == SL_OK)
        st = c->opt->kind == SL_INGEST_SWEEPS ? sl__ingest_sweeps(c) : ingest_results(c);
    if (st == SL_OK && c->summary->rows == 0) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, sl_rowsrc_line(c->src), 0,
                    "the file has a header but no data rows");
        st = SL_EINPUT;
    }
    if (st == SL_OK || st == SL_EINPUT)
        sl__ingest_flush_errors(c); /* any other failure is said past the limit */
    if (st == SL_OK && c->n_errors > 0 && !c->opt->keep_going)
        st = SL_EINPUT; /* every problem reported; nothing of the file kept */
    if (st == SL_OK && c->rejects)
        st = close_rejects(c);
    if (st == SL_OK)
        st = finish_runs(c);
    return st;
}

static void ctx_free(ingest_ctx *c)
{
    sl_rowsrc_free(c->src);
    free(c->reject_buf);
    if (c->rejects)
        fclose(c->rejects);
    if (c->feed)
        fclose(c->feed); /* no call on its hasher, finished or not */
    sl__ingest_hasher_free(c->hasher); /* before the file it reads is closed */
    if (c->in && c->in != stdin)
        fclose(c->in);
    sl__ingest_batch_free(c->batch);
    free(c->wafers);
    if (c->dies)
        for (size_t i = 0; i < die_count(c->plan); i++)
            free(c->dies[i].names);
    free(c->dies);
    sl__ingest_density_free(c->densities);
    free(c->run_ids);
    free(c->run_rows);
    free(c->run_devices);
    sl_store_revision_clear(&c->revision);
    sl_plan_free(c->plan);
    sl_store_lot_clear(&c->lot);
}

static void hash_bytes(void *ctx, const char *bytes, size_t n)
{
    ingest_ctx *c = ctx;
    if (!c->hash_failed && sl__ingest_hasher_add(c->hasher, bytes, n) != 0)
        c->hash_failed = 1;
}

/* The file opened and its hasher started first thing, so that a regular
 * file's checksum is read while the lot is loaded and the rows parsed; a
 * file that cannot be opened is said when the rows are wanted. Standard
 * input is hashed as it is read, whatever it is: it may not start at the
 * beginning of a file. */
static void start_hash(ingest_ctx *c)
{
    bool is_stdin = strcmp(c->opt->path, "-") == 0;
    c->in = is_stdin ? stdin : fopen(c->opt->path, "rb");
    if (c->in && !is_stdin)
        c->hasher = sl__ingest_hasher_of_file(fileno(c->in));
}

static sl_status open_source(ingest_ctx *c)
{
    if (!c->in) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->opt->path, 0, 0, "cannot open file for reading");
        return SL_EIO;
    }
    if (!c->hasher && !(c->hasher = sl__ingest_hasher_new()))
        return SL_ENOMEM;
    bool taps = sl__ingest_hasher_taps(c->hasher);
    if (!taps && (c->feed = sl__ingest_hasher_stream(c->hasher)))
        return sl_rowsrc_open_stream(&c->src, c->feed, c->file, c->opt->columns, c->diag);
    return sl_rowsrc_open_stream_tapped(&c->src, c->in, c->file, c->opt->columns,
                                        taps ? hash_bytes : NULL, c, c->diag);
}

sl_status sl_ingest_run(sl_ingest_summary *out, sl_store *store,
                        const sl_ingest_options *options, sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    size_t errors_before = sl_diag_count(diag, SL_SEV_ERROR);
    sl_diag *scratch = sl_diag_new();
    if (!scratch) {
        sl_diag_error(diag, "out of memory");
        return SL_ENOMEM;
    }
    ingest_ctx c = { .store = store, .diag = scratch, .user_diag = diag, .opt = options,
                     .summary = out, .started_s = sl__ingest_now_s() };
    c.file = strcmp(options->path, "-") == 0 ? "<stdin>" : options->path;
    start_hash(&c);
    sl_status st = sl_store_begin(store, c.diag);
    if (st == SL_OK)
        st = load_lot(&c);
    if (st == SL_OK)
        st = open_source(&c);
    if (st == SL_OK)
        st = import_body(&c);
    if (st == SL_OK)
        st = sl_store_commit(store, c.diag);
    else
        sl_store_rollback(store);
    if (st != SL_OK && c.rejects) {
        fclose(c.rejects);
        c.rejects = NULL;
        remove(options->rejects_path); /* no rejects file of an import that did not happen */
    }
    sl__ingest_progress(&c);
    /* what stopped an import other than its rows (the disk, the store) is
     * always said, past the limit too */
    flush_errors(&c, st != SL_OK && st != SL_EINPUT);
    long shown = (long)(sl_diag_count(diag, SL_SEV_ERROR) - errors_before);
    if (c.n_errors > shown) /* after the rest, at the last line read */
        sl_diag_add(diag, SL_SEV_ERROR, c.file, c.src ? sl_rowsrc_line(c.src) : 0, 0,
                    "%ld more problems not shown (%ld in all)", c.n_errors - shown, c.n_errors);
    out->errors = c.n_errors;
    ctx_free(&c);
    sl_diag_free(scratch);
    out->seconds = sl__ingest_now_s() - c.started_s;
    return st;
}
