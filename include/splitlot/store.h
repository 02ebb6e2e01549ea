/* SPDX-License-Identifier: MIT
 * The store, on an SQLite file (the embedded default: WAL, foreign keys, a
 * busy timeout) or a PostgreSQL server (a postgresql:// URL): opening with
 * migrations; one transaction per command; and the reads and writes of lots,
 * plan revisions, predictions, devices and sweeps. All SQL of splitlot lives
 * here; other modules see plain structs and never know the backend.
 */
#ifndef SPLITLOT_STORE_H
#define SPLITLOT_STORE_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/predict.h"

typedef struct sl_store sl_store;

/* Schema version this build writes (number of db/NNN_*.sql migrations). */
int sl_store_schema_version(void);

/* 1 when a location names a PostgreSQL server (a postgresql:// or
 * postgres:// URL) rather than an SQLite file. */
int sl_store_is_server(const char *location);

/* Open (creating if needed) and migrate the database at path: an SQLite
 * file, or a PostgreSQL server when path is a postgresql:// or postgres://
 * URL (libpq's; the password from ~/.pgpass or PGPASSWORD, never shown). A
 * database written by a newer splitlot is refused. Returns SL_OK, SL_EDB with
 * a message naming the file or the URL (unreadable, read-only for a needed
 * migration, not a database, too new, server unreachable, login refused). */
sl_status sl_store_open(sl_store **out, const char *path, sl_diag *diag);
void sl_store_close(sl_store *store);

/* One write transaction per command: on SQLite BEGIN IMMEDIATE (waits up to
 * the busy timeout for other writers), on PostgreSQL a transaction in which
 * an import or a plan holds its lot's lock; COMMIT, ROLLBACK. */
sl_status sl_store_begin(sl_store *store, sl_diag *diag);
sl_status sl_store_commit(sl_store *store, sl_diag *diag);
void sl_store_rollback(sl_store *store);

/* A read-only transaction over one snapshot (for a copy's source or a
 * checksum); end it with sl_store_rollback. */
sl_status sl_store_begin_read(sl_store *store, sl_diag *diag);

/* ---- lots moved between stores, whatever their backends ---- */

/* Copy one lot with every row it has (plan revisions, splits, wafers,
 * predictions, wafer loads, runs, devices, measurements, sweeps) from src
 * into dst, in the source's order under new row ids. Call inside a
 * transaction of dst (and a read of src). SL_ENOTFOUND when src lacks the
 * lot, SL_EINPUT when dst has it already (nothing written). */
sl_status sl_store_copy_lot(sl_store *dst, sl_store *src, const char *lot, sl_diag *diag);

/* SHA-256 (64 hex digits) of everything a store holds of a lot (lot NULL:
 * of every lot): names, plan texts, numbers to 17 digits, sweep blobs and
 * the order of runs and measurements, but not row ids, so a copy has its
 * source's checksum on either backend. */
sl_status sl_store_checksum(sl_store *store, char hex[65], const char *lot, sl_diag *diag);

/* Save a validated plan, its layout and predictions under the plan's lot.
 * Same text as the newest revision: nothing is written, *created = 0.
 * Otherwise the next revision number (1, 2, ...) is given, *created = 1: to a
 * new revision, or, when the text is that of an older revision (a plan changed
 * and changed back), to that revision, which becomes the newest again with
 * its stored splits, wafers and predictions. Once the lot has measured
 * devices, a revision that would put a measured wafer (one with devices) in
 * another split (another name, dielectric or treatments), make it a spare
 * or drop it is refused: SL_EINPUT, the message naming every such wafer,
 * nothing written. Call inside a transaction. */
sl_status sl_store_save_plan(sl_store *store, int *revision, int *created,
                             const sl_plan *plan, const sl_layout *layout,
                             const sl_prediction *predictions, size_t n_predictions,
                             sl_diag *diag);

/* The newest plan revision of a lot. */
typedef struct {
    long lot_id;
    long revision_id;
    int revision;
    char *lot;
    char *plan_text;     /* malloc'd */
    char *plan_name;     /* file name the plan was read from */
    char *created_utc;
} sl_store_lot;

/* SL_ENOTFOUND (with a message listing known lots) when the lot is absent. */
sl_status sl_store_find_lot(sl_store *store, sl_store_lot *out, const char *lot,
                            sl_diag *diag);
void sl_store_lot_clear(sl_store_lot *lot);

/* One stored revision (by row id) of a found lot, as sl_store_find_lot gives
 * the newest: what an analysis of a view reads its plan from, whichever
 * revision is the newest. SL_OK, SL_EDB, SL_ENOMEM. */
sl_status sl_store_load_lot_revision(sl_store *store, sl_store_lot *out, const sl_store_lot *lot,
                                     long revision_id, sl_diag *diag);

/* Names of all lots in creation order (malloc'd array of malloc'd strings). */
sl_status sl_store_list_lots(sl_store *store, char ***names, size_t *count, sl_diag *diag);
void sl_store_free_names(char **names, size_t count);

/* ---- what a plan revision stored: splits, wafers, predictions ---- */

typedef struct {
    char *name, *dielectric;
    char *treatments;            /* ';'-joined treatment names, "" for none */
    char *levels;                /* ';'-joined factor levels; "" when not recorded */
    double planned_doping_per_cm2, planned_doping_sigma_per_cm2;
} sl_store_split;

typedef struct {
    char *name;
    long split;                  /* index into the revision's splits, -1 for a spare */
    long process_order;          /* 0 for a spare */
} sl_store_wafer;

/* A revision as stored: splits by split index, wafers in plan order, the
 * plan's temperatures in plan order and the predictions split-major (split
 * s at temperature t is predictions[s * n_temperatures + t]; the fields
 * predict does not store, capacitance_rel_sigma and gate_range_from_plan,
 * are 0). Read back, never recomputed. */
typedef struct {
    long revision_id;
    sl_store_split *splits;
    size_t n_splits;
    sl_store_wafer *wafers;
    size_t n_wafers;
    double *temperatures_K;
    size_t n_temperatures;
    sl_prediction *predictions;
} sl_store_revision;

/* SL_OK, SL_EDB (also for a revision whose predictions are incomplete),
 * SL_ENOMEM. */
sl_status sl_store_load_revision(sl_store *store, sl_store_revision *out, long revision_id,
                                 sl_diag *diag);
void sl_store_revision_clear(sl_store_revision *revision);

/* The load (1-based) of each of a stored revision's wafers in each batched
 * step, as predict stored them: loads[w * n_steps + s] for rev->wafers[w]
 * and the step named steps[s], 0 where the wafer went through no load of it
 * (a spare, a step not batched). loads holds rev->n_wafers x n_steps.
 * SL_OK, SL_EDB. */
sl_status sl_store_load_wafer_loads(sl_store *store, long *loads, const sl_store_revision *rev,
                                    const char *const *steps, size_t n_steps, sl_diag *diag);

/* ---- measurement runs ---- */

/* One run: a file's measurements at one step and temperature. */
typedef struct {
    long id;
    char *step;
    double temperature_K;
    long revision_id;
    int revision;                /* the revision's number */
    char *kind;                  /* "results" or "sweeps" */
    char *source_name;
    char *source_sha256;         /* 64 hex digits; "" for runs migrated from version 3 */
    long rows, devices;
    char *created_utc;
    long current;                /* of its measurements, those still current: no later
                                    run of its step and temperature measured the device
                                    again (0: superseded, out of every view) */
} sl_store_run;

/* Start a run of a lot (inside the import's transaction); rows and devices
 * are set by sl_store_finish_run. */
sl_status sl_store_add_run(sl_store *store, long *run_id, long lot_id, long revision_id,
                           const char *step, double temperature_K, const char *kind,
                           const char *source_name, sl_diag *diag);

/* Record a run's row count, its devices (the measurements the import added
 * to it) and source checksum (NULL: unknown); a run without measurements
 * (devices 0) is removed. */
sl_status sl_store_finish_run(sl_store *store, long run_id, long rows, long devices,
                              const char *sha256_hex, sl_diag *diag);

/* The distinct devices measured by a lot's runs with ids >= first_run_id
 * (an import's runs: a device at two temperatures counts once). */
sl_status sl_store_count_import_devices(sl_store *store, long *devices, long lot_id,
                                        long first_run_id, sl_diag *diag);

/* Row id the next run gets: an import's runs have ids >= it. */
sl_status sl_store_next_run_id(sl_store *store, long *id, sl_diag *diag);

/* Every run of a lot, oldest first (malloc'd array). */
sl_status sl_store_list_runs(sl_store *store, sl_store_run **runs, size_t *count, long lot_id,
                             sl_diag *diag);
void sl_store_runs_free(sl_store_run *runs, size_t count);

/* The view an analysis shows by default: want_step, or (NULL) the step of
 * the lot's newest run, and of temperatures (plan order) the first with a
 * run of that step. Without runs: "final" (or want_step) and
 * temperatures[0]. step gets at most 64 bytes. */
sl_status sl_store_default_view(sl_store *store, char step[65], double *temperature_K,
                                long lot_id, const char *want_step,
                                const double *temperatures_K, size_t n_temperatures,
                                sl_diag *diag);

/* The plan revision of the newest run of a view, or the lot's newest
 * revision when the view has no run. */
sl_status sl_store_view_revision(sl_store *store, long *revision_id, const sl_store_lot *lot,
                                 const char *step, double temperature_K, sl_diag *diag);

/* ---- devices and their measurements ---- */

/* A measurement to insert, with its device's identity. NaN numbers are
 * stored as NULL. */
typedef struct {
    const char *wafer;        /* wafer name */
    const char *name;
    long die_x, die_y;
    const char *device_type;  /* or NULL; with the geometry, kept by a new device */
    double channel_length_um, channel_width_um; /* NaN: the plan's */
    const char *source;       /* "results" or "sweeps" */
    const char *fit_class;    /* "ok", "unmeasured", or a fit class name */
    double cnp_V, cnp_sigma_V;
    double mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs;
    double n0_per_cm2, n0_sigma_per_cm2;
    double r_contact_ohm, r_contact_sigma_ohm;
    double rel_rms, r_squared;
    const char *fit_model;    /* "symmetric", "two-mobility", or NULL (results) */
    double electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs; /* two-mobility */
    long n_spikes;            /* points left out as spikes; < 0 for none recorded */
    double hysteresis_V;      /* double sweeps */
    long points_dropped;      /* < 0 for none recorded */
    const double *vg_V;       /* raw sweep, or NULL */
    const double *r_ohm;
    size_t n_points;
    double drain_bias_V;      /* > 0 when every r_ohm is drain_bias_V / |I_d| (a
                                 file of drain currents at one drain bias): the
                                 resistances may be stored as the currents, in
                                 less than half the bytes; NaN otherwise */
    long source_line;         /* line of the device's first row in its file; 0: unknown */
} sl_store_device;

/* A device with every number NaN, no fit details and no sweep: start from
 * this and fill what is known. */
void sl_store_device_init(sl_store_device *dev);

/* Call before an import's inserts into a lot (inside its transaction): a lot
 * without devices yet takes plain inserts. */
sl_status sl_store_begin_lot_inserts(sl_store *store, long lot_id, sl_diag *diag);

typedef enum {
    SL_STORE_ADDED = 0,        /* a new measurement (of a new device or a known one) */
    SL_STORE_IN_RUN,           /* the device has a measurement in this run already */
    SL_STORE_DIE_DIFFERS       /* the device is stored at another die */
} sl_store_outcome;

typedef struct {
    sl_store_outcome outcome;
    long measurement_id;       /* ADDED: the new one; IN_RUN: the one in the run */
    long device_id;
    long die_x, die_y;         /* DIE_DIFFERS: the stored die */
    long source_line;          /* IN_RUN: line of the measurement in the run;
                                  DIE_DIFFERS: of the device's first measurement */
    long run_id;               /* DIE_DIFFERS: run of the device's first measurement */
} sl_store_insert;

/* Add a measurement of a device to a run: the device is found by lot,
 * wafer name and name, or added. Nothing is written unless the outcome is
 * SL_STORE_ADDED. Returns SL_OK whatever the outcome; SL_EDB (a constraint
 * failure says which kind), SL_ENOMEM. Inside a transaction. */
sl_status sl_store_insert_measurement(sl_store *store, sl_store_insert *out, long lot_id,
                                      long run_id, const sl_store_device *dev, sl_diag *diag);

/* Replace the extraction columns and the sweep of a stored measurement
 * (used when an import finds more points of a device further down the file). */
sl_status sl_store_update_measurement(sl_store *store, long measurement_id,
                                      const sl_store_device *dev, sl_diag *diag);

/* Scratch space of one import for rows of a device that come back after other
 * devices' rows (a temporary table, gone with the connection): stage points
 * under a key, read them back in the order staged. */
sl_status sl_store_stage_points(sl_store *store, long key, const double *vg_V,
                                const double *r_ohm, size_t n, sl_diag *diag);
sl_status sl_store_staged_points(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                                 long key, sl_diag *diag);

/* ---- an import in progress (inside its transaction) ---- */

/* A measurement of this import, with its device. */
typedef struct {
    long id;                     /* the measurement */
    long run_id, die_x, die_y;
    long source_line;            /* 0 when unknown */
    char wafer[65], name[65];
    long points_dropped;         /* overflow and compliance points left out */
} sl_store_import_device;

/* Measurements in runs >= first_run_id that still need a fit: fit class
 * "pending" or points staged under their id (malloc'd array, by id). */
sl_status sl_store_open_devices(sl_store *store, sl_store_import_device **devices,
                                size_t *count, long first_run_id, sl_diag *diag);

/* Measurements in runs >= first_run_id per fit class: counts[i] for
 * names[i]; *total gets them all. */
sl_status sl_store_count_classes(sl_store *store, long *counts, const char *const *names,
                                 size_t n_names, long *total, long first_run_id, sl_diag *diag);

/* Number of devices stored for a lot. */
sl_status sl_store_count_devices(sl_store *store, long *count, long lot_id, sl_diag *diag);

/* Raw sweep of a stored measurement back from its packed blob: malloc'd arrays. */
sl_status sl_store_load_sweep(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                              long measurement_id, sl_diag *diag);

/* A device's measurement as read back for analysis. Names fit in 64 bytes
 * (the import refuses longer ones). NaN where the column is NULL. */
typedef struct {
    long id;                     /* the measurement */
    long device_id, run_id;
    char wafer[65], name[65];
    char fit_class[32], source[8], fit_model[16];
    long die_x, die_y;
    double temperature_K;        /* its run's */
    double cnp_V, cnp_sigma_V;
    double mobility_cm2_per_Vs, n0_per_cm2, r_contact_ohm;
    double hysteresis_V;
    double channel_length_um, channel_width_um; /* NaN: the plan's */
    double rel_rms, r_squared;
    long n_points;               /* 0 for results rows */
    long measurements;           /* the device's measurements in the view's runs */
    /* the two-mobility fit's carriers (sl_store_load_devices only; NaN else) */
    double electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs;
} sl_store_device_row;

/* The current measurement of every device of a lot in a view (step and
 * temperature: the newest run wins), by wafer, die row, die column and
 * name, whatever the order of the files they came from (malloc'd array). */
sl_status sl_store_load_devices(sl_store *store, sl_store_device_row **rows, size_t *count,
                                long lot_id, const char *step, double temperature_K,
                                sl_diag *diag);

/* Lots in creation order with their newest revision (malloc'd array; clear
 * each entry with sl_store_lot_clear, then free the array). */
sl_status sl_store_load_lots(sl_store *store, sl_store_lot **lots, size_t *count, sl_diag *diag);

/* ---- the scratch space of an analysis (flat memory, whatever the lot) ---- */

/* Temporary tables on the store's connection, kept by the database (SQLite
 * in a file, temp_store FILE; PostgreSQL on the server), so they do not grow
 * the process: a lot's devices kept for passes over them, and devices listed
 * by severity. While a scratch is open, the connection reads one snapshot of
 * the database (SQLite: a savepoint; PostgreSQL: a REPEATABLE READ
 * transaction, read back in chunks through cursors): another process's import
 * is never seen half way. One scratch per connection at a time. */
typedef struct sl_store_scratch sl_store_scratch;

sl_status sl_store_scratch_open(sl_store_scratch **out, sl_store *store, sl_diag *diag);
void sl_store_scratch_close(sl_store_scratch *scratch);

/* Choose the runs whose measurements are kept: a lot's runs of one step and
 * temperature (call before keeping wafers). */
sl_status sl_store_scratch_view(sl_store_scratch *scratch, long lot_id, const char *step,
                                double temperature_K, sl_diag *diag);

/* Keep the current measurement in the view of the lot's devices on the
 * wafer named wafer, by die row, die column and name, under a group and a
 * tag of the caller's. Keeping wafer names in sl_store_load_devices order
 * keeps the devices in its order. */
sl_status sl_store_scratch_keep_wafer(sl_store_scratch *scratch, long lot_id, const char *wafer,
                                      long group, long tag, sl_diag *diag);

/* The kept devices in the order kept: *row has everything but cnp_sigma_V,
 * rel_rms, r_squared and n_points (NaN or 0), valid until the next read;
 * NULL after the last, and the next call starts over. */
sl_status sl_store_scratch_next_kept(sl_store_scratch *scratch, long *group, long *tag,
                                     const sl_store_device_row **row, sl_diag *diag);

/* Once every wafer is kept: the group, tag, V_cnp, mobility, n0 and
 * hysteresis (NaN where none) of the kept devices of one fit class that
 * have a V_cnp, packed many to a row into a table of their own; then read
 * back in the order kept, far faster than whole devices: *more = 0 after
 * the last, and the next call starts over. */
typedef struct {
    long group, tag;
    double cnp_V;
    double mobility_cm2_per_Vs, n0_per_cm2, hysteresis_V;
} sl_store_scratch_value;

sl_status sl_store_scratch_keep_values(sl_store_scratch *scratch, const char *fit_class,
                                       sl_diag *diag);
sl_status sl_store_scratch_next_value(sl_store_scratch *scratch, int *more,
                                      sl_store_scratch_value *value, sl_diag *diag);

/* List the device last read by sl_store_scratch_next_kept with a severity;
 * read the listed ones back as kept devices, most severe first, then by
 * wafer and device name (byte order). */
sl_status sl_store_scratch_rank(sl_store_scratch *scratch, double severity, sl_diag *diag);
sl_status sl_store_scratch_next_ranked(sl_store_scratch *scratch, long *group, long *tag,
                                       const sl_store_device_row **row, sl_diag *diag);

/* Start every read-back over. */
void sl_store_scratch_rewind(sl_store_scratch *scratch);

#endif
