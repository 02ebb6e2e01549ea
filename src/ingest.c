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
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "ingest_internal.h"
#include "splitlot/text.h"

double ingest_now_s(void)
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

void ingest_error_at(const ingest_ctx *c, sl_diag *diag, long line, long column,
                     const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    error_at_v(c, diag, line, column, fmt, ap);
    va_end(ap);
}

void ingest_error_at_row(ingest_ctx *c, long column, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    error_at_v(c, c->diag, sl_csv_line(c->csv), column, fmt, ap);
    va_end(ap);
}

sl_status ingest_die_moved(const ingest_ctx *c, sl_diag *diag, long line, const char *device,
                           const char *wafer, const long here[2], const sl_store_insert *stored)
{
    if (stored->run_id >= c->first_run_id)
        ingest_error_at(c, diag, line, c->col.die_x,
                        "device '%s' on wafer '%s' is at die (%ld, %ld) here but at (%ld, %ld) on "
                        "line %ld", device, wafer, here[0], here[1], stored->die_x, stored->die_y,
                        stored->source_line);
    else
        ingest_error_at(c, diag, line, c->col.die_x,
                        "device '%s' on wafer '%s' is at die (%ld, %ld) here but lot '%s' has it "
                        "at (%ld, %ld) since measurement run %ld; a device keeps its die",
                        device, wafer, here[0], here[1], c->lot.lot, stored->die_x, stored->die_y,
                        stored->run_id);
    return SL_EINPUT;
}

void ingest_progress(ingest_ctx *c)
{
    if (!c->opt->progress)
        return;
    sl_ingest_progress p = { c->summary->rows, c->summary->devices,
                             ingest_now_s() - c->started_s };
    c->opt->progress(&p, c->opt->progress_ctx);
}

/* ---- set-up: the lot's plan, its stored revision, wafers and runs ---- */

long ingest_wafer_index(const ingest_ctx *c, const char *wafer)
{
    return sl_plan_wafer_index(c->plan, wafer);
}

/* Each plan wafer's split and gate capacitance as the store has them. */
static sl_status load_wafers(ingest_ctx *c)
{
    const sl_plan *plan = c->plan;
    const sl_store_revision *rev = &c->revision;
    c->wafers = calloc(plan->n_wafers ? plan->n_wafers : 1, sizeof *c->wafers);
    if (!c->wafers)
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
    if (!c->run_ids || !c->run_rows)
        return SL_ENOMEM;
    return load_wafers(c);
}

/* ---- columns ---- */

static void map_columns(ingest_ctx *c)
{
    ingest_columns *k = &c->col;
    k->wafer = sl_csv_column(c->csv, "wafer");
    k->device = sl_csv_column(c->csv, "device");
    k->die_x = sl_csv_column(c->csv, "die_x");
    k->die_y = sl_csv_column(c->csv, "die_y");
    k->vg = sl_csv_column(c->csv, "vg_V");
    k->r = sl_csv_column(c->csv, "r_ohm");
    k->vcnp = sl_csv_column(c->csv, "v_cnp_V");
    k->mobility = sl_csv_column(c->csv, "mobility_cm2_per_Vs");
    k->n0 = sl_csv_column(c->csv, "n0_per_cm2");
    k->r_contact = sl_csv_column(c->csv, "r_contact_ohm");
    k->temperature = sl_csv_column(c->csv, "temperature_K");
}

static sl_status require_columns(ingest_ctx *c)
{
    static const char *const results[] = { "wafer", "device", "die_x", "die_y", "v_cnp_V" };
    static const char *const sweeps[] = { "wafer", "device", "die_x", "die_y", "vg_V", "r_ohm" };
    int is_sweeps = c->opt->kind == SL_INGEST_SWEEPS;
    const char *const *need = is_sweeps ? sweeps : results;
    size_t n_need = is_sweeps ? 6 : 5;
    sl_status st = SL_OK;
    for (size_t i = 0; i < n_need; i++)
        if (sl_csv_column(c->csv, need[i]) < 0) {
            sl_diag_add(c->diag, SL_SEV_ERROR, c->file, sl_csv_line(c->csv), 0,
                        "missing column '%s' (a %s file needs %s%s)", need[i],
                        is_sweeps ? "sweeps" : "results",
                        is_sweeps ? "wafer,device,die_x,die_y,vg_V,r_ohm"
                                  : "wafer,device,die_x,die_y,v_cnp_V",
                        !is_sweeps && sl_csv_column(c->csv, "vg_V") >= 0
                            ? "; this looks like a sweeps file: use --sweeps" : "");
            st = SL_EINPUT;
        }
    map_columns(c);
    return st;
}

/* ---- rows ---- */

static sl_status read_die(ingest_ctx *c, long *out, long column, long size, const char *axis)
{
    double v;
    sl_status st = sl_csv_number(&v, c->csv, (size_t)column, c->diag);
    if (st != SL_OK)
        return st;
    if (v != floor(v) || v < 0 || v >= (double)size) {
        ingest_error_at_row(c, column, "%s '%s' is not a die index from 0 to %ld (wafer map %ld x %ld)",
                            axis, sl_csv_field(c->csv, (size_t)column, NULL), size - 1,
                            c->plan->wafer_rows, c->plan->wafer_cols);
        return SL_EINPUT;
    }
    *out = (long)v;
    return SL_OK;
}

static sl_status check_wafer(ingest_ctx *c, ingest_row *row)
{
    long w = ingest_wafer_index(c, row->wafer);
    if (w < 0) {
        char hint[96];
        ingest_error_at_row(c, c->col.wafer, "unknown wafer '%s' in lot '%s'%s", row->wafer,
                            c->lot.lot,
                            sl_text_did_you_mean(hint, sizeof hint, row->wafer,
                                                 (const char *const *)c->plan->wafers,
                                                 c->plan->n_wafers));
        return SL_EINPUT;
    }
    if (c->wafers[w].split < 0) {
        ingest_error_at_row(c, c->col.wafer,
                            "wafer '%s' is a spare in the layout of lot '%s': it belongs to no split",
                            row->wafer, c->lot.lot);
        return SL_EINPUT;
    }
    row->wafer_index = (size_t)w;
    return SL_OK;
}

sl_status ingest_optional_number(ingest_ctx *c, double *out, long column)
{
    *out = NAN;
    if (column < 0 || sl_csv_is_empty(c->csv, (size_t)column))
        return SL_OK;
    return sl_csv_number(out, c->csv, (size_t)column, c->diag);
}

/* The row's plan temperature: its temperature_K value, or the default. */
static sl_status read_temperature(ingest_ctx *c, ingest_row *row)
{
    double t = NAN;
    row->temperature = c->default_temperature;
    sl_status st = ingest_optional_number(c, &t, c->col.temperature);
    if (st != SL_OK || isnan(t))
        return st;
    long k = match_temperature(c, t);
    if (k < 0) {
        char allowed[256];
        list_temperatures(allowed, sizeof allowed, c);
        ingest_error_at_row(c, c->col.temperature,
                            "temperature '%s' is not one of the plan's temperatures (%s)",
                            sl_csv_field(c->csv, (size_t)c->col.temperature, NULL), allowed);
        return SL_EINPUT;
    }
    row->temperature = (size_t)k;
    return SL_OK;
}

sl_status ingest_read_row(ingest_ctx *c, ingest_row *row)
{
    size_t len;
    sl_status st = sl_csv_text(&row->wafer, &len, c->csv, (size_t)c->col.wafer,
                               SL_INGEST_MAX_NAME_BYTES, c->diag);
    if (st == SL_OK)
        st = sl_csv_text(&row->device, &len, c->csv, (size_t)c->col.device,
                         SL_INGEST_MAX_NAME_BYTES, c->diag);
    if (st == SL_OK && (!*row->wafer || !*row->device)) {
        ingest_error_at_row(c, *row->wafer ? c->col.device : c->col.wafer,
                            "empty %s name", *row->wafer ? "device" : "wafer");
        return SL_EINPUT;
    }
    if (st == SL_OK)
        st = check_wafer(c, row);
    if (st == SL_OK)
        st = read_die(c, &row->die_x, c->col.die_x, c->plan->wafer_cols, "die_x");
    if (st == SL_OK)
        st = read_die(c, &row->die_y, c->col.die_y, c->plan->wafer_rows, "die_y");
    if (st == SL_OK)
        st = read_temperature(c, row);
    return st;
}

/* ---- device results ---- */

/* The store's answer to a row's measurement: a device twice at one
 * temperature in this file, or at another die than stored. */
static sl_status refused_row(ingest_ctx *c, const ingest_row *row, const sl_store_insert *ins)
{
    if (ins->outcome == SL_STORE_IN_RUN) {
        ingest_error_at_row(c, c->col.device,
                            "duplicate device '%s' on wafer '%s' at %g K (first on line %ld)",
                            row->device, row->wafer,
                            c->revision.temperatures_K[row->temperature], ins->source_line);
        return SL_EINPUT;
    }
    const long here[2] = { row->die_x, row->die_y };
    return ingest_die_moved(c, c->diag, sl_csv_line(c->csv), row->device, row->wafer, here, ins);
}

static sl_status results_row(ingest_ctx *c)
{
    ingest_row row;
    sl_status st = ingest_read_row(c, &row);
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
    dev.source_line = sl_csv_line(c->csv);
    double *numbers[] = { &dev.cnp_V, &dev.mobility_cm2_per_Vs, &dev.n0_per_cm2, &dev.r_contact_ohm };
    long columns[] = { c->col.vcnp, c->col.mobility, c->col.n0, c->col.r_contact };
    for (int i = 0; st == SL_OK && i < 4; i++)
        st = ingest_optional_number(c, numbers[i], columns[i]);
    if (st != SL_OK)
        return st;
    dev.fit_class = isnan(dev.cnp_V) ? "unmeasured" : "ok";
    sl_store_insert ins;
    st = sl_store_insert_measurement(c->store, &ins, c->lot.lot_id, c->run_ids[row.temperature],
                                     &dev, c->diag);
    if (st == SL_OK && ins.outcome != SL_STORE_ADDED)
        st = refused_row(c, &row, &ins);
    c->summary->unmeasured += st == SL_OK && isnan(dev.cnp_V);
    c->summary->devices += st == SL_OK;
    return st;
}

static sl_status ingest_results(ingest_ctx *c)
{
    bool has = false;
    sl_status st;
    while ((st = sl_csv_next(&has, c->csv, c->diag)) == SL_OK && has) {
        c->summary->rows++;
        st = results_row(c);
        if (st != SL_OK)
            return st;
        if ((c->summary->rows & 0xffff) == 0)
            ingest_progress(c);
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

static sl_status finish_runs(ingest_ctx *c)
{
    ingest_hasher_free(c->hasher, c->summary->sha256);
    c->hasher = NULL;
    if (c->hash_failed)
        return SL_ENOMEM;
    sl_status st = SL_OK;
    for (size_t t = 0; st == SL_OK && t < c->revision.n_temperatures; t++) {
        long devices = 0;
        st = sl_store_finish_run(c->store, c->run_ids[t], c->run_rows[t], c->summary->sha256,
                                 &devices, c->diag);
        if (st != SL_OK || devices == 0 || c->summary->n_runs >= SL_INGEST_MAX_RUNS)
            continue;
        size_t k = c->summary->n_runs++;
        c->summary->runs[k].run = c->run_ids[t];
        c->summary->runs[k].temperature_K = c->revision.temperatures_K[t];
        c->summary->runs[k].rows = c->run_rows[t];
        c->summary->runs[k].devices = devices;
    }
    return st;
}

static sl_status import_body(ingest_ctx *c)
{
    sl_status st = require_columns(c);
    if (st == SL_OK)
        st = sl_store_begin_lot_inserts(c->store, c->lot.lot_id, c->diag);
    if (st == SL_OK)
        st = start_runs(c);
    if (st == SL_OK)
        st = c->opt->kind == SL_INGEST_SWEEPS ? ingest_sweeps(c) : ingest_results(c);
    if (st == SL_OK && c->summary->rows == 0) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, sl_csv_line(c->csv), 0,
                    "the file has a header but no data rows");
        st = SL_EINPUT;
    }
    if (st == SL_OK)
        st = finish_runs(c);
    return st;
}

static void ctx_free(ingest_ctx *c)
{
    sl_csv_free(c->csv);
    ingest_hasher_free(c->hasher, NULL);
    ingest_batch_free(c->batch);
    free(c->wafers);
    ingest_density_free(c->densities);
    free(c->run_ids);
    free(c->run_rows);
    sl_store_revision_clear(&c->revision);
    sl_plan_free(c->plan);
    sl_store_lot_clear(&c->lot);
}

static void hash_bytes(void *ctx, const char *bytes, size_t n)
{
    ingest_ctx *c = ctx;
    if (!c->hash_failed && ingest_hasher_add(c->hasher, bytes, n) != 0)
        c->hash_failed = 1;
}

sl_status sl_ingest_run(sl_ingest_summary *out, sl_store *store,
                        const sl_ingest_options *options, sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    ingest_ctx c = { .store = store, .diag = diag, .opt = options, .summary = out,
                     .started_s = ingest_now_s() };
    c.file = strcmp(options->path, "-") == 0 ? "<stdin>" : options->path;
    sl_status st = sl_store_begin(store, diag);
    if (st == SL_OK)
        st = load_lot(&c);
    if (st == SL_OK && !(c.hasher = ingest_hasher_new()))
        st = SL_ENOMEM;
    if (st == SL_OK)
        st = sl_csv_open_tapped(&c.csv, options->path, hash_bytes, &c, diag);
    if (st == SL_OK)
        st = import_body(&c);
    if (st == SL_OK)
        st = sl_store_commit(store, diag);
    else
        sl_store_rollback(store);
    ingest_progress(&c);
    ctx_free(&c);
    out->seconds = ingest_now_s() - c.started_s;
    return st;
}
