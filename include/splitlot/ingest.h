/* SPDX-License-Identifier: MIT
 * Import of measurements into a lot: device results CSV (one row per device)
 * or raw transfer sweeps CSV (one row per point, fitted per device), streamed
 * in flat memory, checked against the lot's plan and layout, written in one
 * transaction so a failed import leaves the database as it was.
 */
#ifndef SPLITLOT_INGEST_H
#define SPLITLOT_INGEST_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/fit.h"
#include "splitlot/store.h"

typedef enum { SL_INGEST_RESULTS = 0, SL_INGEST_SWEEPS } sl_ingest_kind;

/* Most temperatures one import reports runs for (a plan may list more). */
#define SL_INGEST_MAX_RUNS 16

/* A file's temperature matches a plan temperature within this (K): a
 * prober's reading of 299.8 K is the plan's 300 K. */
#define SL_INGEST_TEMPERATURE_TOLERANCE_K 0.5

/* Progress as the import streams. */
typedef struct {
    long rows;
    long devices;
    double seconds;
} sl_ingest_progress;

typedef struct {
    const char *lot;           /* lot name, as stored by `predict` */
    const char *path;          /* CSV file, "-" for standard input */
    sl_ingest_kind kind;
    const char *step;          /* process step measured after; NULL: "final" */
    double temperature_K;      /* rows without a temperature_K value; NaN or 0:
                                  the plan's first temperature */
    int threads;               /* fitting threads, >= 1 (sweeps only) */
    sl_fit_model fit_model;    /* sweeps: symmetric (default) or two mobilities */
    const char *columns;       /* extra column mappings "vg_V=GateVoltage,..." or NULL
                                  (see sl_rowsrc_open) */
    int keep_going;            /* store the good devices of a file with problems */
    const char *rejects_path;  /* with keep_going: the rejected devices' rows, as
                                  the file wrote them, plus a reason column; or NULL */
    /* sweeps: the gate's carrier density from the charge balance with
     * quantum capacitance at each device's temperature (default), or the
     * short form C_g (V_g - V_cnp) / e */
    sl_fit_density_model density_model;
    /* called now and then from the importing thread; may be NULL */
    void (*progress)(const sl_ingest_progress *progress, void *ctx);
    void *progress_ctx;
} sl_ingest_options;

typedef struct {
    long rows;                 /* data rows read */
    long devices;              /* devices stored (while importing: measurements) */
    long measurements;         /* device x temperature measurements stored */
    long unmeasured;           /* results rows with an empty v_cnp_V */
    long per_class[SL_FIT_CLASS_COUNT]; /* sweeps: devices per fit class */
    size_t n_runs;             /* measurement runs made: one per temperature */
    struct {
        long run;              /* its id in the store */
        double temperature_K;
        long rows, devices;
    } runs[SL_INGEST_MAX_RUNS];
    char sha256[65];           /* of the file's bytes, hex */
    double seconds;
    char separator;            /* of the file: ',', ';' or '\t' */
    char unused_columns[256];  /* header names nobody read, ", "-separated */
    long errors;               /* problems found in the file */
    long rejected_devices;     /* --keep-going: devices not stored */
    long rejected_rows;        /* their rows written to the rejects file */
    long points_overflow;      /* sweeps: instrument overflow values, dropped */
    long devices_with_overflow;
    long points_compliance;    /* sweeps: points at compliance, dropped */
    long double_sweeps;        /* sweeps: devices fitted branch by branch */
    long hysteresis_flagged;   /* above the plan's device.max_hysteresis_V */
} sl_ingest_summary;

/* Import a file into a lot of an open store, in one transaction, as one
 * measurement run per temperature found (step, temperature, the lot's newest
 * plan revision, the file's name and SHA-256). A device measured before at
 * the same step and temperature gets a new measurement that supersedes the
 * earlier one for analysis (a re-probe); the earlier stays stored. Sweeps of
 * a device at several temperatures are fitted one temperature at a time.
 * Errors: SL_EINPUT with file:line messages (missing column, bad number, NaN
 * or Inf, unknown or spare wafer, die outside the wafer map or other than
 * the device's stored die, a device twice at one temperature, a temperature
 * not in the plan, a sweep with fewer than SL_FIT_MIN_POINTS points),
 * SL_ENOTFOUND for an unknown lot, SL_EIO, SL_EDB, SL_ENOMEM. Problems of
 * rows are all looked for: the first 20 of the file are reported one by one,
 * then their count. Without keep_going, on any error nothing of the import is
 * kept; with it, devices with a problem in their rows are left out (their
 * rows written to rejects_path) and the rest stored; a problem the store
 * finds (a device at another die than stored) still fails the whole import,
 * as does a rejects file that cannot be written. */
sl_status sl_ingest_run(sl_ingest_summary *out, sl_store *store,
                        const sl_ingest_options *options, sl_diag *diag);

#endif
