/* SPDX-License-Identifier: MIT
 * Import of measurements (see include/splitlot/ingest.h): set-up against the
 * lot's stored plan, the checks every row gets, device results, and the one
 * transaction around it all. Sweeps are in ingest_sweeps.c.
 */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "ingest_internal.h"
#include "splitlot/predict.h"
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

void ingest_already_stored(const ingest_ctx *c, sl_diag *diag, long line, long column,
                           const char *device, const char *wafer)
{
    ingest_error_at(c, diag, line, column,
                    "device '%s' on wafer '%s' is already stored for lot '%s' "
                    "(use --replace to import the lot's measurements again)",
                    device, wafer, c->lot.lot);
}

void ingest_progress(ingest_ctx *c)
{
    if (!c->opt->progress)
        return;
    sl_ingest_progress p = { c->summary->rows, c->summary->devices,
                             ingest_now_s() - c->started_s };
    c->opt->progress(&p, c->opt->progress_ctx);
}

/* ---- set-up: the lot's plan, layout and wafers ---- */

static sl_status load_wafers(ingest_ctx *c)
{
    const sl_plan *plan = c->plan;
    c->wafers = calloc(plan->n_wafers ? plan->n_wafers : 1, sizeof *c->wafers);
    if (!c->wafers)
        return SL_ENOMEM;
    for (size_t i = 0; i < plan->n_wafers; i++) {
        ingest_wafer *w = &c->wafers[i];
        w->split = c->layout->wafers[i].split;
        if (w->split < 0)
            continue;
        double cg = 0.0;
        size_t dielectric = plan->splits[w->split].dielectric;
        sl_status st = sl_predict_gate_capacitance(&cg, NULL, NULL, plan, dielectric);
        if (st == SL_OK)
            st = sl_store_wafer_id(c->store, &w->wafer_id, c->lot.revision_id, plan->wafers[i]);
        if (st != SL_OK) {
            sl_diag_error(c->diag, "lot '%s': wafer '%s' is missing from the stored layout",
                          c->lot.lot, plan->wafers[i]);
            return SL_EDB;
        }
        sl_fit_config_default(&w->fit, cg, plan->channel_length_um, plan->channel_width_um);
        w->fit.model = c->opt->fit_model;
    }
    return SL_OK;
}

static sl_status load_lot(ingest_ctx *c)
{
    sl_status st = sl_store_find_lot(c->store, &c->lot, c->opt->lot, c->diag);
    if (st != SL_OK)
        return st;
    st = sl_plan_parse(&c->plan, c->lot.plan_text, strlen(c->lot.plan_text), c->lot.plan_name,
                       c->diag);
    if (st == SL_OK)
        st = sl_layout_build(&c->layout, c->plan, c->diag);
    if (st != SL_OK) {
        sl_diag_error(c->diag, "lot '%s': its stored plan no longer loads", c->opt->lot);
        return SL_EDB;
    }
    sl_diag_clear(c->diag); /* the plan's warnings were shown when it was stored */
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
    long w = sl_plan_wafer_index(c->plan, row->wafer);
    if (w < 0) {
        const char *near = sl_text_nearest(row->wafer, (const char *const *)c->plan->wafers,
                                           c->plan->n_wafers, 2);
        ingest_error_at_row(c, c->col.wafer, "unknown wafer '%s' in lot '%s'%s%s%s", row->wafer,
                            c->lot.lot, near ? " (did you mean '" : "", near ? near : "",
                            near ? "'?)" : "");
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
        st = ingest_optional_number(c, &row->temperature_K, c->col.temperature);
    return st;
}

/* ---- device results ---- */

/* A row whose device is stored already: earlier in this file (the store
 * knows the line) or by an earlier import. */
static sl_status duplicate_row(ingest_ctx *c, const ingest_row *row, long wafer_id)
{
    sl_store_import_device first;
    sl_status st = sl_store_find_import_device(c->store, &first, c->lot.lot_id, wafer_id,
                                               row->device, c->first_device_id, c->diag);
    if (st == SL_OK)
        ingest_error_at_row(c, c->col.device, "duplicate device '%s' on wafer '%s' (first on line %ld)",
                            row->device, row->wafer, first.source_line);
    else if (st == SL_ENOTFOUND)
        ingest_already_stored(c, c->diag, sl_csv_line(c->csv), c->col.device, row->device,
                              row->wafer);
    return st == SL_OK || st == SL_ENOTFOUND ? SL_EINPUT : st;
}

static sl_status results_row(ingest_ctx *c)
{
    ingest_row row;
    sl_status st = ingest_read_row(c, &row);
    if (st != SL_OK)
        return st;
    sl_store_device dev;
    sl_store_device_init(&dev);
    dev.wafer_id = c->wafers[row.wafer_index].wafer_id;
    dev.name = row.device;
    dev.die_x = row.die_x;
    dev.die_y = row.die_y;
    dev.source = "results";
    dev.source_line = sl_csv_line(c->csv);
    dev.temperature_K = row.temperature_K;
    double *numbers[] = { &dev.cnp_V, &dev.mobility_cm2_per_Vs, &dev.n0_per_cm2, &dev.r_contact_ohm };
    long columns[] = { c->col.vcnp, c->col.mobility, c->col.n0, c->col.r_contact };
    for (int i = 0; st == SL_OK && i < 4; i++)
        st = ingest_optional_number(c, numbers[i], columns[i]);
    if (st != SL_OK)
        return st;
    dev.fit_class = isnan(dev.cnp_V) ? "unmeasured" : "ok";
    c->summary->unmeasured += isnan(dev.cnp_V);
    st = sl_store_insert_device(c->store, NULL, c->lot.lot_id, &dev, c->diag);
    if (st == SL_EINPUT) { /* the store's own duplicate check: one located message */
        sl_diag_clear(c->diag);
        st = duplicate_row(c, &row, dev.wafer_id);
    }
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

static sl_status import_body(ingest_ctx *c)
{
    sl_status st = require_columns(c);
    if (st != SL_OK)
        return st;
    if (c->opt->replace) {
        long before = 0;
        st = sl_store_count_devices(c->store, &before, c->lot.lot_id, c->diag);
        if (st == SL_OK)
            st = sl_store_delete_measurements(c->store, c->lot.lot_id, c->diag);
        c->summary->replaced = before;
    }
    if (st == SL_OK)
        st = sl_store_begin_lot_inserts(c->store, c->lot.lot_id, c->diag);
    if (st == SL_OK)
        st = sl_store_next_device_id(c->store, &c->first_device_id, c->diag);
    if (st == SL_OK)
        st = c->opt->kind == SL_INGEST_SWEEPS ? ingest_sweeps(c) : ingest_results(c);
    if (st == SL_OK && c->summary->rows == 0) {
        sl_diag_add(c->diag, SL_SEV_ERROR, c->file, sl_csv_line(c->csv), 0,
                    "the file has a header but no data rows");
        st = SL_EINPUT;
    }
    if (st == SL_OK)
        st = sl_store_record_import(c->store, c->lot.lot_id,
                                    c->opt->kind == SL_INGEST_SWEEPS ? "sweeps" : "results",
                                    c->file, c->summary->rows, c->summary->devices, c->diag);
    return st;
}

static void ctx_free(ingest_ctx *c)
{
    sl_csv_free(c->csv);
    ingest_batch_free(c->batch);
    free(c->wafers);
    ingest_density_free(c->densities);
    sl_layout_free(c->layout);
    sl_plan_free(c->plan);
    sl_store_lot_clear(&c->lot);
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
    if (st == SL_OK)
        st = sl_csv_open(&c.csv, options->path, diag);
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
