/* SPDX-License-Identifier: MIT
 * One lot against its plan with every device in memory (see
 * include/splitlot/analyze.h), for the report: the stream of
 * analyze_stream.c, its devices and failure-analysis order collected; and
 * the flag names of a device.
 */
#include <stdlib.h>

#include "analyze_internal.h"

int sl_analyze_flag_names(const sl_analyze_device *d, const char **names)
{
    int n = 0;
    if (d->flags & SL_FLAG_OUTLIER)
        names[n++] = "outlier";
    if (d->flags & SL_FLAG_OFF_PREDICTION)
        names[n++] = "off-prediction";
    if (d->flags & SL_FLAG_FIT_CLASS)
        names[n++] = d->fit_class;
    if (d->flags & SL_FLAG_UNMEASURED)
        names[n++] = "unmeasured";
    if (d->flags & SL_FLAG_BELOW_FLOOR)
        names[n++] = "below-floor";
    if (d->flags & SL_FLAG_HYSTERESIS)
        names[n++] = "hysteresis";
    if (d->flags & SL_FLAG_LOW_MOBILITY)
        names[n++] = "low-mobility";
    return n;
}

void sl_analysis_free(sl_analysis *a)
{
    if (!a)
        return;
    sl_analysis_owner *o = (sl_analysis_owner *)a;
    free(o->rows);
    free(a->devices);
    free(a->splits);
    free(a->effects);
    free(a->flagged);
    free(a->split_gate_min_V);
    free(a->split_gate_max_V);
    free(a->split_capacitance_F_per_m2);
    free(a->split_floor_per_cm2);
    sl_store_runs_free(a->runs, a->n_runs);
    sl_plan_free(a->plan);
    sl_store_lot_clear(&a->lot);
    sl_store_lot_clear(&a->view_revision);
    free(o);
}

/* What the in-memory analysis adds to a stream's summary. */
typedef struct {
    sl_store_device_row *rows; /* own the strings the devices point at */
    sl_analyze_device *devices;
    size_t *flagged;
} collected;

static sl_status collect_devices(collected *c, sl_analysis_stream *s, sl_diag *diag)
{
    const sl_analysis *a = sl_analysis_stream_summary(s);
    size_t i = 0;
    c->rows = malloc((a->n_devices + 1) * sizeof *c->rows);
    c->devices = malloc((a->n_devices + 1) * sizeof *c->devices);
    if (!c->rows || !c->devices)
        return SL_ENOMEM;
    const sl_analyze_device *d = NULL;
    sl_status st;
    while ((st = sl_analysis_stream_next_device(s, &d, diag)) == SL_OK && d && i < a->n_devices) {
        c->rows[i] = *sl__analysis_stream_row(s);
        c->devices[i] = *d;
        c->devices[i].wafer = c->rows[i].wafer;
        c->devices[i].device = c->rows[i].name;
        c->devices[i].fit_class = c->rows[i].fit_class;
        c->devices[i].fit_model = c->rows[i].fit_model;
        i++;
    }
    if (st == SL_OK && (d || i != a->n_devices)) {
        sl_analysis_stream_rewind(s);
        st = sl__analyze_lot_changed(a, diag);
    }
    return st;
}

typedef struct {
    long id;
    size_t index;
} id_index;

static int by_id(const void *pa, const void *pb)
{
    const id_index *a = pa, *b = pb;
    return (a->id > b->id) - (a->id < b->id);
}

/* The failure-analysis order as device indices, found by device id. */
static sl_status collect_flagged(collected *c, sl_analysis_stream *s, sl_diag *diag)
{
    const sl_analysis *a = sl_analysis_stream_summary(s);
    size_t n = a->n_devices, k = 0;
    c->flagged = malloc((a->n_flagged + 1) * sizeof *c->flagged);
    id_index *ids = malloc((n + 1) * sizeof *ids);
    if (!c->flagged || !ids) {
        free(ids);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < n; i++)
        ids[i] = (id_index){ c->devices[i].device_id, i };
    qsort(ids, n, sizeof *ids, by_id);
    const sl_analyze_device *d = NULL;
    sl_status st;
    while ((st = sl_analysis_stream_next_flagged(s, &d, diag)) == SL_OK && d && k < a->n_flagged) {
        id_index key = { d->device_id, 0 }, *hit = bsearch(&key, ids, n, sizeof *ids, by_id);
        if (!hit)
            break;
        c->flagged[k++] = hit->index;
    }
    free(ids);
    if (st == SL_OK && (d || k != a->n_flagged)) {
        sl_analysis_stream_rewind(s);
        st = sl__analyze_lot_changed(a, diag);
    }
    return st;
}

sl_status sl_analyze_lot(sl_analysis **out, sl_store *store, const char *lot, sl_diag *diag)
{
    return sl_analyze_lot_view(out, store, lot, NULL, diag);
}

sl_status sl_analyze_lot_view(sl_analysis **out, sl_store *store, const char *lot,
                              const sl_analyze_view *view, sl_diag *diag)
{
    *out = NULL;
    sl_analysis_stream *s = NULL;
    collected c = { 0 };
    sl_status st = sl_analyze_lot_stream_view(&s, store, lot, view, diag);
    if (st == SL_OK)
        st = collect_devices(&c, s, diag);
    if (st == SL_OK)
        st = collect_flagged(&c, s, diag);
    if (st != SL_OK) {
        free(c.rows);
        free(c.devices);
        free(c.flagged);
        sl_analysis_stream_free(s);
        return st;
    }
    sl_analysis_owner *o = sl__analysis_stream_release(s);
    o->rows = c.rows;
    o->pub.devices = c.devices;
    o->pub.flagged = c.flagged;
    *out = &o->pub;
    return SL_OK;
}
