/* SPDX-License-Identifier: MIT
 * The embedded SQLite store: opening with migrations (PRAGMA user_version),
 * WAL, foreign keys and a busy timeout; one transaction per command; and the
 * reads and writes of lots, plan revisions, predictions, devices and sweeps.
 * All SQL of splitlot lives here; other modules see plain structs.
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

/* Open (creating if needed) and migrate the database at path. A database
 * written by a newer splitlot is refused. Returns SL_OK, SL_EDB with a message
 * naming the file (unreadable, read-only for a needed migration, not a
 * database, too new). */
sl_status sl_store_open(sl_store **out, const char *path, sl_diag *diag);
void sl_store_close(sl_store *store);

/* One write transaction per command: BEGIN IMMEDIATE (waits up to the busy
 * timeout for other writers), COMMIT, ROLLBACK. */
sl_status sl_store_begin(sl_store *store, sl_diag *diag);
sl_status sl_store_commit(sl_store *store, sl_diag *diag);
void sl_store_rollback(sl_store *store);

/* Save a validated plan, its layout and predictions under the plan's lot.
 * Same text as the newest revision: nothing is written, *created = 0.
 * Otherwise the next revision number (1, 2, ...) is given, *created = 1: to a
 * new revision, or, when the text is that of an older revision (a plan changed
 * and changed back), to that revision, which becomes the newest again with
 * its stored splits, wafers and predictions. Call inside a transaction. */
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

/* Names of all lots in creation order (malloc'd array of malloc'd strings). */
sl_status sl_store_list_lots(sl_store *store, char ***names, size_t *count, sl_diag *diag);
void sl_store_free_names(char **names, size_t count);

/* Wafer id (row id) of a wafer name in a revision; SL_ENOTFOUND if absent. */
sl_status sl_store_wafer_id(sl_store *store, long *wafer_id, long revision_id,
                            const char *wafer);

/* A measured device to insert. NaN numbers are stored as NULL. */
typedef struct {
    long wafer_id;
    const char *name;
    long die_x, die_y;
    const char *source;       /* "results" or "sweeps" */
    const char *fit_class;    /* "ok", "unmeasured", or a fit class name */
    double temperature_K;
    double cnp_V, cnp_sigma_V;
    double mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs;
    double n0_per_cm2, n0_sigma_per_cm2;
    double r_contact_ohm, r_contact_sigma_ohm;
    double rel_rms, r_squared;
    const char *fit_model;    /* "symmetric", "two-mobility", or NULL (results) */
    double electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs; /* two-mobility */
    long n_spikes;            /* points left out as spikes; < 0 for none recorded */
    const double *vg_V;       /* raw sweep, or NULL */
    const double *r_ohm;
    size_t n_points;
    long source_line;         /* line of the device's first row in its file; 0: unknown */
} sl_store_device;

/* A device with every number NaN, no fit details and no sweep: start from
 * this and fill what is known. */
void sl_store_device_init(sl_store_device *dev);

/* Call before an import's inserts into a lot (inside its transaction): a lot
 * without devices yet takes plain inserts, which need not look for the same
 * device under an older plan revision of the lot. */
sl_status sl_store_begin_lot_inserts(sl_store *store, long lot_id, sl_diag *diag);

/* Insert a device (and its packed sweep); *device_id gets its row id (may be
 * NULL). A device already present for the lot and wafer gives SL_EINPUT
 * "duplicate device". Inside a transaction. */
sl_status sl_store_insert_device(sl_store *store, long *device_id, long lot_id,
                                 const sl_store_device *dev, sl_diag *diag);

/* Replace the extraction columns and the sweep of a stored device (used when
 * an import finds more points of a device further down the file). */
sl_status sl_store_update_device(sl_store *store, long device_id, const sl_store_device *dev,
                                 sl_diag *diag);

/* Scratch space of one import for rows of a device that come back after other
 * devices' rows (a temporary table, gone with the connection): stage points
 * under a key, read them back in the order staged. */
sl_status sl_store_stage_points(sl_store *store, long key, const double *vg_V,
                                const double *r_ohm, size_t n, sl_diag *diag);
sl_status sl_store_staged_points(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                                 long key, sl_diag *diag);

/* ---- an import in progress (inside its transaction) ---- */

/* Row id the next inserted device gets: this import's devices have ids >= it. */
sl_status sl_store_next_device_id(sl_store *store, long *id, sl_diag *diag);

/* A device of the lot stored at id >= first_id: what an import needs of a
 * device whose rows come back later in its file. */
typedef struct {
    long id, wafer_id, die_x, die_y;
    long source_line;            /* 0 when unknown */
    char wafer[65], name[65];
} sl_store_import_device;

/* The device with this wafer and name stored at id >= first_id;
 * SL_ENOTFOUND when there is none. */
sl_status sl_store_find_import_device(sl_store *store, sl_store_import_device *found,
                                      long lot_id, long wafer_id, const char *name,
                                      long first_id, sl_diag *diag);

/* Devices stored at id >= first_id that still need a fit: fit class
 * "pending" or points staged under their id (malloc'd array, by id). */
sl_status sl_store_open_devices(sl_store *store, sl_store_import_device **devices,
                                size_t *count, long lot_id, long first_id, sl_diag *diag);

/* Devices stored at id >= first_id per fit class: counts[i] for names[i];
 * *total gets them all. */
sl_status sl_store_count_classes(sl_store *store, long *counts, const char *const *names,
                                 size_t n_names, long *total, long lot_id, long first_id,
                                 sl_diag *diag);

/* Number of devices stored for a lot. */
sl_status sl_store_count_devices(sl_store *store, long *count, long lot_id, sl_diag *diag);

/* Remove a lot's measurements (devices, sweeps) for `ingest --replace`. */
sl_status sl_store_delete_measurements(sl_store *store, long lot_id, sl_diag *diag);

/* Record a finished import (kind "results" or "sweeps"). */
sl_status sl_store_record_import(sl_store *store, long lot_id, const char *kind,
                                 const char *source_name, long rows, long devices,
                                 sl_diag *diag);

/* Raw sweep of a stored device back from its packed blob: malloc'd arrays. */
sl_status sl_store_load_sweep(sl_store *store, double **vg_V, double **r_ohm, size_t *n,
                              long device_id, sl_diag *diag);

/* A stored device as read back for analysis. Names fit in 64 bytes (the
 * import refuses longer ones). NaN where the column is NULL. */
typedef struct {
    long id;
    char wafer[65], name[65];
    char fit_class[32], source[8];
    long die_x, die_y;
    double temperature_K;
    double cnp_V, cnp_sigma_V;
    double mobility_cm2_per_Vs, n0_per_cm2, r_contact_ohm;
    double rel_rms, r_squared;
    long n_points;               /* 0 for results rows */
    char fit_model[24];          /* "symmetric/qc", ...; "" for results rows */
} sl_store_device_row;

/* Every device of a lot, by wafer, die row, die column and name, whatever
 * the order of the files they came from (malloc'd array). */
sl_status sl_store_load_devices(sl_store *store, sl_store_device_row **rows, size_t *count,
                                long lot_id, sl_diag *diag);

/* Lots in creation order with their newest revision (malloc'd array; clear
 * each entry with sl_store_lot_clear, then free the array). */
sl_status sl_store_load_lots(sl_store *store, sl_store_lot **lots, size_t *count, sl_diag *diag);

/* ---- the scratch space of an analysis (flat memory, whatever the lot) ---- */

/* Temporary tables on the store's connection, which SQLite keeps in a file
 * (temp_store FILE), so they do not grow the process: a lot's devices kept
 * for passes over them, and devices listed by severity. While a scratch is
 * open, the connection reads one snapshot of the database (a savepoint:
 * another process's import is never seen half way) and its page caches are
 * held small. One scratch per connection at a time. */
typedef struct sl_store_scratch sl_store_scratch;

sl_status sl_store_scratch_open(sl_store_scratch **out, sl_store *store, sl_diag *diag);
void sl_store_scratch_close(sl_store_scratch *scratch);

/* Keep the lot's devices on wafers named wafer (in any plan revision), by die
 * row, die column and name, under a group and a tag of the caller's. Keeping
 * wafer names in sl_store_load_devices order keeps the devices in its order. */
sl_status sl_store_scratch_keep_wafer(sl_store_scratch *scratch, long lot_id, const char *wafer,
                                      long group, long tag, sl_diag *diag);

/* The kept devices in the order kept: *row has the id, wafer, name, die,
 * fit class, V_cnp and mobility (every other number NaN), valid until the
 * next read; NULL after the last, and the next call starts over. */
sl_status sl_store_scratch_next_kept(sl_store_scratch *scratch, long *group, long *tag,
                                     const sl_store_device_row **row, sl_diag *diag);

/* Once every wafer is kept: the group and V_cnp of the kept devices of one
 * fit class that have a V_cnp, copied into a small table of their own; then
 * read back in the order kept, faster than whole devices: *more = 0 after
 * the last, and the next call starts over. */
sl_status sl_store_scratch_keep_values(sl_store_scratch *scratch, const char *fit_class,
                                       sl_diag *diag);
sl_status sl_store_scratch_next_value(sl_store_scratch *scratch, int *more, long *group,
                                      double *cnp_V, sl_diag *diag);

/* List the device last read by sl_store_scratch_next_kept with a severity;
 * read the listed ones back as kept devices, most severe first, then by
 * wafer and device name (byte order). */
sl_status sl_store_scratch_rank(sl_store_scratch *scratch, double severity, sl_diag *diag);
sl_status sl_store_scratch_next_ranked(sl_store_scratch *scratch, long *group, long *tag,
                                       const sl_store_device_row **row, sl_diag *diag);

/* Start every read-back over. */
void sl_store_scratch_rewind(sl_store_scratch *scratch);

/* Low-level access for the analysis queries of this module's other files. */
struct sqlite3;
struct sqlite3 *sl_store_db(sl_store *store);

#endif
