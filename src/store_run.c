/* SPDX-License-Identifier: MIT
 * The lot's record in the store (see include/splitlot/store.h): measurement
 * runs (added, finished, listed, the default view of an analysis), what a
 * plan revision stored (splits, wafers, temperatures, predictions) read back
 * for the analyses and the import, and the rule that a new revision may not
 * move a measured wafer to another split.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "store_internal.h"

/* ---- runs ---- */

/* The runs of the open transaction: an import's, whatever other clients add
 * to the same server at the same time. */
static sl_status remember_run(sl_store *store, long run_id)
{
    if (store->n_tx_runs == store->cap_tx_runs) {
        size_t cap = store->cap_tx_runs ? 2 * store->cap_tx_runs : 8;
        long *grown = realloc(store->tx_runs, cap * sizeof *grown);
        if (!grown)
            return SL_ENOMEM;
        store->tx_runs = grown;
        store->cap_tx_runs = cap;
    }
    store->tx_runs[store->n_tx_runs++] = run_id;
    return SL_OK;
}

sl_status sl_store_add_run(sl_store *store, long *run_id, long lot_id, long revision_id,
                           const char *step, double temperature_K, const char *kind,
                           const char *source_name, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO measurement_run (lot_id, step, temperature_K, revision_id, kind, "
        "source_name, rows, devices, created_utc) VALUES (?1, ?2, ?3, ?4, ?5, ?6, 0, 0, ?7) "
        "RETURNING id", diag);
    if (s != SL_OK)
        return s;
    char now[32];
    sl__store_now_utc(now);
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, step, -1);
    sl__db_bind_double(st, 3, temperature_K);
    sl__db_bind_int64(st, 4, revision_id);
    sl__db_bind_text(st, 5, kind, -1);
    sl__db_bind_text(st, 6, source_name, -1);
    sl__db_bind_text(st, 7, now, -1);
    s = sl__store_step_id(store, st, run_id, diag, "start a measurement run");
    sl__db_finalize(st);
    if (s == SL_OK)
        s = remember_run(store, *run_id);
    return s;
}

sl_status sl_store_finish_run(sl_store *store, long run_id, long rows, long devices,
                              const char *sha256_hex, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, devices
        ? "UPDATE measurement_run SET rows = ?2, source_sha256 = ?3, devices = ?4 WHERE id = ?1"
        : "DELETE FROM measurement_run WHERE id = ?1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, run_id);
    if (devices) {
        sl__db_bind_int64(st, 2, rows);
        if (sha256_hex && *sha256_hex)
            sl__db_bind_text(st, 3, sha256_hex, -1);
        else
            sl__db_bind_null(st, 3);
        sl__db_bind_int64(st, 4, devices);
    }
    return sl__store_step_once(store, st, diag, "record the measurement run");
}

sl_status sl_store_count_import_devices(sl_store *store, long *devices, long lot_id,
                                        long first_run_id, sl_diag *diag)
{
    *devices = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT count(DISTINCT m.device_id) FROM measurement m JOIN measurement_run r "
        "ON r.id = m.run_id WHERE r.lot_id = ?1 AND r.id >= ?2", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_int64(st, 2, first_run_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW)
        *devices = (long)sl__db_column_int64(st, 0);
    sl__db_finalize(st);
    return rc == SL__DB_ROW ? SL_OK : sl__store_db_error(store, diag, "count the import's devices");
}

sl_status sl_store_next_run_id(sl_store *store, long *id, sl_diag *diag)
{
    return sl__store_count_query(store, id,
                                "SELECT coalesce(max(id), 0) + 1 + 0 * ?1 FROM measurement_run",
                                0, diag, "read the run ids");
}

void sl_store_runs_free(sl_store_run *runs, size_t count)
{
    for (size_t i = 0; runs && i < count; i++) {
        free(runs[i].step);
        free(runs[i].kind);
        free(runs[i].source_name);
        free(runs[i].source_sha256);
        free(runs[i].created_utc);
    }
    free(runs);
}

static int read_run(sl__stmt *st, sl_store_run *r)
{
    r->id = (long)sl__db_column_int64(st, 0);
    r->step = sl__store_column_strdup(st, 1);
    r->temperature_K = sl__db_column_double(st, 2);
    r->revision_id = (long)sl__db_column_int64(st, 3);
    r->revision = sl__db_column_int64(st, 4);
    r->kind = sl__store_column_strdup(st, 5);
    r->source_name = sl__store_column_strdup(st, 6);
    r->source_sha256 = sl__store_column_strdup(st, 7);
    r->rows = (long)sl__db_column_int64(st, 8);
    r->devices = (long)sl__db_column_int64(st, 9);
    r->created_utc = sl__store_column_strdup(st, 10);
    r->current = (long)sl__db_column_int64(st, 11);
    return r->step && r->kind && r->source_name && r->source_sha256 && r->created_utc;
}

sl_status sl_store_list_runs(sl_store *store, sl_store_run **runs, size_t *count, long lot_id,
                             sl_diag *diag)
{
    *runs = NULL;
    *count = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT r.id, r.step, r.temperature_K, r.revision_id, p.revision, r.kind, r.source_name, "
        "r.source_sha256, r.rows, r.devices, r.created_utc, "
        "(SELECT count(*) FROM measurement m WHERE m.run_id = r.id AND NOT EXISTS "
        "(SELECT 1 FROM measurement n JOIN measurement_run q ON q.id = n.run_id "
        "WHERE n.device_id = m.device_id AND n.run_id > r.id AND q.step = r.step "
        "AND q.temperature_K = r.temperature_K)) "
        "FROM measurement_run r "
        "JOIN plan_revision p ON p.id = r.revision_id WHERE r.lot_id = ?1 ORDER BY r.id", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    size_t cap = 0;
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        if (*count == cap) {
            size_t grown_cap = cap ? 2 * cap : 8;
            sl_store_run *grown = realloc(*runs, grown_cap * sizeof *grown);
            if (!grown) {
                s = SL_ENOMEM;
                break;
            }
            *runs = grown;
            cap = grown_cap;
        }
        memset(&(*runs)[*count], 0, sizeof **runs);
        int ok = read_run(st, &(*runs)[(*count)++]);
        if (!ok) {
            s = SL_ENOMEM;
            break;
        }
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "list the lot's measurement runs");
    sl__db_finalize(st);
    if (s != SL_OK) {
        sl_store_runs_free(*runs, *count);
        *runs = NULL;
        *count = 0;
    }
    return s;
}

/* 1 when the lot has a run of the step at the temperature, else 0; -1 on
 * an error (in diag). */
static int has_run(sl_store *store, long lot_id, const char *step, double temperature_K,
                   sl_diag *diag)
{
    sl__stmt *st = NULL;
    if (sl__store_prepare(store, &st,
                         "SELECT EXISTS (SELECT 1 FROM measurement_run WHERE lot_id = ?1 AND "
                         "step = ?2 AND temperature_K = ?3)", diag) != SL_OK)
        return -1;
    sl__db_bind_int64(st, 1, lot_id);
    sl__db_bind_text(st, 2, step, -1);
    sl__db_bind_double(st, 3, temperature_K);
    int found = sl__db_step(st) == SL__DB_ROW ? sl__db_column_int64(st, 0) : -1;
    if (found < 0)
        sl__store_db_error(store, diag, "look up the lot's measurement runs");
    sl__db_finalize(st);
    return found;
}

/* The step of the lot's newest run into step; "final" without runs. */
static sl_status newest_step(sl_store *store, char step[65], long lot_id, sl_diag *diag)
{
    snprintf(step, 65, "final");
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT step FROM measurement_run WHERE lot_id = ?1 ORDER BY id DESC LIMIT 1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    int rc = sl__db_step(st);
    if (rc == SL__DB_ROW)
        snprintf(step, 65, "%s", (const char *)sl__db_column_text(st, 0));
    sl__db_finalize(st);
    return rc == SL__DB_ROW || rc == SL__DB_DONE ? SL_OK
                                                 : sl__store_db_error(store, diag, "look up the lot's runs");
}

sl_status sl_store_default_view(sl_store *store, char step[65], double *temperature_K,
                                long lot_id, const char *want_step,
                                const double *temperatures_K, size_t n_temperatures,
                                sl_diag *diag)
{
    *temperature_K = n_temperatures ? temperatures_K[0] : 300.0;
    sl_status s = SL_OK;
    if (want_step)
        snprintf(step, 65, "%s", want_step);
    else
        s = newest_step(store, step, lot_id, diag);
    if (s != SL_OK)
        return s;
    for (size_t i = 0; i < n_temperatures; i++) {
        int found = has_run(store, lot_id, step, temperatures_K[i], diag);
        if (found < 0)
            return SL_EDB;
        if (found) {
            *temperature_K = temperatures_K[i];
            break;
        }
    }
    return SL_OK;
}

sl_status sl_store_view_revision(sl_store *store, long *revision_id, const sl_store_lot *lot,
                                 const char *step, double temperature_K, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT revision_id FROM measurement_run WHERE lot_id = ?1 AND step = ?2 AND "
        "temperature_K = ?3 ORDER BY id DESC LIMIT 1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot->lot_id);
    sl__db_bind_text(st, 2, step, -1);
    sl__db_bind_double(st, 3, temperature_K);
    int rc = sl__db_step(st);
    *revision_id = rc == SL__DB_ROW ? (long)sl__db_column_int64(st, 0) : lot->revision_id;
    sl__db_finalize(st);
    return rc == SL__DB_ROW || rc == SL__DB_DONE
               ? SL_OK
               : sl__store_db_error(store, diag, "look up the view's plan revision");
}

/* ---- a stored revision ---- */

void sl_store_revision_clear(sl_store_revision *r)
{
    for (size_t i = 0; r->splits && i < r->n_splits; i++) {
        free(r->splits[i].name);
        free(r->splits[i].dielectric);
        free(r->splits[i].treatments);
        free(r->splits[i].levels);
    }
    for (size_t i = 0; r->wafers && i < r->n_wafers; i++)
        free(r->wafers[i].name);
    free(r->splits);
    free(r->wafers);
    free(r->temperatures_K);
    free(r->predictions);
    memset(r, 0, sizeof *r);
}

/* Rows of a query with ?1 = revision id, each handed to read (which returns
 * 0 when out of memory) into a growing array of elements of size bytes. */
typedef int (*row_reader)(sl__stmt *st, void *element);

static sl_status read_rows(sl_store *store, void **items, size_t *count, size_t size,
                           const char *sql, long revision_id, row_reader read, sl_diag *diag,
                           const char *what)
{
    *items = NULL;
    *count = 0;
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st, sql, diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, revision_id);
    size_t cap = 0;
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        if (*count == cap) {
            cap = cap ? 2 * cap : 16;
            void *grown = realloc(*items, cap * size);
            if (!grown) {
                s = SL_ENOMEM;
                break;
            }
            *items = grown;
        }
        char *element = (char *)*items + *count * size;
        memset(element, 0, size);
        (*count)++;
        if (!read(st, element)) {
            s = SL_ENOMEM;
            break;
        }
    }
    if (s == SL_OK && rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, what);
    sl__db_finalize(st);
    return s;
}

static int read_split(sl__stmt *st, void *element)
{
    sl_store_split *p = element;
    p->name = sl__store_column_strdup(st, 0);
    p->dielectric = sl__store_column_strdup(st, 1);
    p->treatments = sl__store_column_strdup(st, 2);
    p->levels = sl__store_column_strdup(st, 3);
    p->planned_doping_per_cm2 = sl__db_column_double(st, 4);
    p->planned_doping_sigma_per_cm2 = sl__db_column_double(st, 5);
    return p->name && p->dielectric && p->treatments && p->levels;
}

static int read_wafer(sl__stmt *st, void *element)
{
    sl_store_wafer *w = element;
    w->name = sl__store_column_strdup(st, 0);
    w->split = sl__db_column_is_null(st, 1) ? -1 : (long)sl__db_column_int64(st, 1);
    w->process_order = (long)sl__db_column_int64(st, 2);
    return w->name != NULL;
}

static int read_temperature(sl__stmt *st, void *element)
{
    *(double *)element = sl__db_column_double(st, 0);
    return 1;
}

static int read_prediction(sl__stmt *st, void *element)
{
    sl_prediction *p = element;
    p->split = (size_t)sl__db_column_int64(st, 0);
    double *fields[] = { &p->temperature_K, &p->gate_capacitance_F_per_m2, &p->eot_nm,
                         &p->doping_per_cm2.val, &p->doping_per_cm2.sigma, &p->cnp_V.val,
                         &p->cnp_V.sigma, &p->gate_min_V, &p->gate_max_V,
                         &p->max_electron_density_per_cm2, &p->max_hole_density_per_cm2,
                         &p->fermi_at_gate_min_eV, &p->fermi_at_gate_max_eV,
                         &p->gate_efficiency_per_cm2_V, &p->thermal_floor_per_cm2,
                         &p->thermal_floor_V, &p->disorder_crossover_K };
    for (int i = 0; i < (int)(sizeof fields / sizeof fields[0]); i++)
        *fields[i] = sl__db_column_double(st, 1 + i);
    p->gate_capacitance_F_per_m2 /= SL_NF_CM2_PER_F_M2;
    p->cnp_in_range = sl__db_column_int64(st, 18);
    return 1;
}

/* Every split has one prediction per temperature, in the same order. */
static int predictions_complete(const sl_store_revision *r, size_t n_predictions)
{
    if (n_predictions != r->n_splits * r->n_temperatures)
        return 0;
    for (size_t i = 0; i < n_predictions; i++)
        if (r->predictions[i].split != i / r->n_temperatures ||
            r->predictions[i].temperature_K != r->temperatures_K[i % r->n_temperatures])
            return 0;
    return 1;
}

sl_status sl_store_load_revision(sl_store *store, sl_store_revision *out, long revision_id,
                                 sl_diag *diag)
{
    memset(out, 0, sizeof *out);
    out->revision_id = revision_id;
    size_t n_predictions = 0;
    sl_status s = read_rows(store, (void **)&out->splits, &out->n_splits, sizeof *out->splits,
        "SELECT name, dielectric, treatments, levels, planned_doping_per_cm2, "
        "planned_doping_sigma_per_cm2 FROM split WHERE revision_id = ?1 ORDER BY split_index",
        revision_id, read_split, diag, "read the stored splits");
    if (s == SL_OK)
        s = read_rows(store, (void **)&out->wafers, &out->n_wafers, sizeof *out->wafers,
            "SELECT w.name, s.split_index, coalesce(w.process_order, 0) FROM wafer w "
            "LEFT JOIN split s ON s.id = w.split_id WHERE w.revision_id = ?1 ORDER BY w.id",
            revision_id, read_wafer, diag, "read the stored wafers");
    if (s == SL_OK)
        s = read_rows(store, (void **)&out->temperatures_K, &out->n_temperatures, sizeof(double),
            "SELECT p.temperature_K FROM prediction p JOIN split s ON s.id = p.split_id "
            "WHERE s.revision_id = ?1 AND s.split_index = (SELECT min(split_index) FROM split "
            "WHERE revision_id = ?1) ORDER BY p.rowid",
            revision_id, read_temperature, diag, "read the stored temperatures");
    if (s == SL_OK)
        s = read_rows(store, (void **)&out->predictions, &n_predictions, sizeof *out->predictions,
            "SELECT s.split_index, p.temperature_K, p.gate_capacitance_nF_per_cm2, p.eot_nm, "
            "p.doping_per_cm2, p.doping_sigma_per_cm2, p.cnp_V, p.cnp_sigma_V, p.gate_min_V, "
            "p.gate_max_V, p.max_electron_density_per_cm2, p.max_hole_density_per_cm2, "
            "p.fermi_at_gate_min_eV, p.fermi_at_gate_max_eV, p.gate_efficiency_per_cm2_V, "
            "p.thermal_floor_per_cm2, p.thermal_floor_V, p.disorder_crossover_K, p.cnp_in_range "
            "FROM prediction p JOIN split s ON s.id = p.split_id WHERE s.revision_id = ?1 "
            "ORDER BY s.split_index, p.rowid",
            revision_id, read_prediction, diag, "read the stored predictions");
    if (s == SL_OK && (out->n_splits == 0 || !predictions_complete(out, n_predictions))) {
        sl_diag_error(diag, "plan revision %ld: its stored splits and predictions are incomplete",
                      revision_id);
        s = SL_EDB;
    }
    if (s != SL_OK)
        sl_store_revision_clear(out);
    return s;
}

/* Index of a stored wafer by name, -1 when absent. */
static long wafer_index(const sl_store_revision *rev, const char *name)
{
    for (size_t w = 0; w < rev->n_wafers; w++)
        if (strcmp(rev->wafers[w].name, name) == 0)
            return (long)w;
    return -1;
}

/* Index of a step by name, -1 when absent. */
static long step_index(const char *const *steps, size_t n_steps, const char *name)
{
    for (size_t k = 0; k < n_steps; k++)
        if (strcmp(steps[k], name) == 0)
            return (long)k;
    return -1;
}

sl_status sl_store_load_wafer_loads(sl_store *store, long *loads, const sl_store_revision *rev,
                                    const char *const *steps, size_t n_steps, sl_diag *diag)
{
    memset(loads, 0, rev->n_wafers * n_steps * sizeof *loads);
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT w.name, l.step, l.load FROM wafer_load l JOIN wafer w ON w.id = l.wafer_id "
        "WHERE w.revision_id = ?1", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, rev->revision_id);
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        const char *wafer = (const char *)sl__db_column_text(st, 0);
        const char *step = (const char *)sl__db_column_text(st, 1);
        long w = wafer_index(rev, wafer ? wafer : "");
        long k = step_index(steps, n_steps, step ? step : "");
        if (w >= 0 && k >= 0)
            loads[(size_t)w * n_steps + (size_t)k] = (long)sl__db_column_int64(st, 2);
    }
    if (rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the wafers' loads");
    sl__db_finalize(st);
    return s;
}

/* ---- a new revision against the measured wafers ---- */

/* What a wafer belongs to in the new layout, in the stored split's words:
 * "name|dielectric|treatments" (treatments ';'-joined), or "" for a spare. */
static void new_split_key(char *buf, size_t size, const sl_plan *plan, const sl_layout *layout,
                          const char *wafer)
{
    buf[0] = '\0';
    long split = sl_layout_split_of_wafer(layout, wafer);
    if (split < 0)
        return;
    const sl_plan_split *sp = &plan->splits[split];
    size_t k = (size_t)snprintf(buf, size, "%s|%s|", sp->name, plan->dielectrics[sp->dielectric].name);
    for (size_t i = 0; i < sp->n_treatments && k < size; i++)
        k += (size_t)snprintf(buf + k, size - k, "%s%s", i ? ";" : "",
                              plan->treatments[sp->treatments[i]].name);
}

static void append_moved(char *list, size_t size, size_t *used, const char *wafer,
                         const char *before, const char *after)
{
    if (*used >= size - 1)
        return;
    int n = snprintf(list + *used, size - *used, "%s%s (%s -> %s)", *used ? ", " : "", wafer,
                     before, *after ? after : "no split");
    *used += n > 0 ? (size_t)n : 0;
    if (*used >= size)
        *used = size - 1;
}

sl_status sl__store_check_measured_wafers(sl_store *store, long lot_id, const sl_plan *plan,
                                         const sl_layout *layout, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "SELECT w.name, s.name, s.name || '|' || s.dielectric || '|' || s.treatments "
        "FROM wafer w JOIN split s ON s.id = w.split_id "
        "WHERE w.revision_id = (SELECT id FROM plan_revision WHERE lot_id = ?1 "
        "ORDER BY revision DESC LIMIT 1) "
        "AND EXISTS (SELECT 1 FROM device d WHERE d.lot_id = ?1 AND d.wafer = w.name) "
        "ORDER BY w.id", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, lot_id);
    char moved[1024] = "", key[4096];
    size_t used = 0, n_moved = 0;
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        const char *wafer = (const char *)sl__db_column_text(st, 0);
        const char *before = (const char *)sl__db_column_text(st, 1);
        const char *stored = (const char *)sl__db_column_text(st, 2);
        new_split_key(key, sizeof key, plan, layout, wafer);
        if (strcmp(key, stored) == 0)
            continue;
        long split = sl_layout_split_of_wafer(layout, wafer);
        append_moved(moved, sizeof moved, &used, wafer, before,
                     split >= 0 ? plan->splits[split].name : "");
        n_moved++;
    }
    if (rc != SL__DB_DONE)
        s = sl__store_db_error(store, diag, "read the lot's measured wafers");
    sl__db_finalize(st);
    if (s != SL_OK || n_moved == 0)
        return s;
    sl_diag_add(diag, SL_SEV_ERROR, plan->path, 0, 0,
                "lot '%s' has measurements on %zu wafer%s this plan would move to another split "
                "or drop: %s; a measured wafer keeps its split (keep the design, wafers and seed "
                "of the stored plan, or plan a new lot)",
                plan->lot, n_moved, n_moved == 1 ? "" : "s", moved);
    return SL_EINPUT;
}
