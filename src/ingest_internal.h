/* SPDX-License-Identifier: MIT
 * Private to the ingest module: the state of one import shared by ingest.c
 * (set-up, row checks, device results) and ingest_sweeps.c (sweep runs,
 * parallel fitting in batches, devices whose rows come back later).
 */
#ifndef SL_INGEST_INTERNAL_H
#define SL_INGEST_INTERNAL_H

#include <pthread.h>
#include <stdbool.h>
#include <stdint.h>

#include "splitlot/fit.h"
#include "splitlot/ingest.h"
#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/rowsrc.h"
#include "splitlot/store.h"
#include "sha256.h"

#define SL_INGEST_MAX_NAME_BYTES 64
#define SL_INGEST_MAX_POINTS 100000
#define SL_INGEST_BATCH_DEVICES 256
/* Problems reported one by one per file; the rest are counted. */
#define SL_INGEST_MAX_ERRORS 20

/* What the store says about one wafer of the lot's plan. */
typedef struct {
    long split;              /* -1 for a spare */
    sl_fit_config fit;       /* the stored gate capacitance of its split */
} ingest_wafer;

/* Columns of the file (0-based, for messages), -1 when absent. */
typedef struct {
    long wafer, device, die_x, die_y, vg, r, id, vd, vcnp, temperature, device_type, length;
} ingest_columns;

/* One row's device identity, checked. */
typedef struct {
    const char *wafer, *device;
    size_t wafer_index;
    long die_x, die_y;           /* as the prober wrote them */
    size_t temperature;          /* index into the plan's temperatures */
    long device_type;            /* plan device type, -1 for none */
    double channel_length_um, channel_width_um; /* the device's own channel */
} ingest_row;

typedef struct ingest_batch ingest_batch;
typedef struct ingest_density ingest_density;

/* The SHA-256 of the imported file on a thread of its own (ingest_hash.c).
 * sl__ingest_hasher_of_file reads a regular file itself through fd (the
 * import's open file; NULL when fd is not a regular file). Otherwise
 * sl__ingest_hasher_new hashes what the reader hands it: add every block in
 * order (0, or -1 when out of memory); sl__ingest_hasher_taps says which.
 * finish waits for the digest (hex), releases the hasher and says whether a
 * regular file could be read to its end and is still as it was when the
 * hasher started; free drops a hasher whose digest is not wanted. */
typedef struct ingest_hasher ingest_hasher;
typedef enum {
    INGEST_HASH_OK,
    INGEST_HASH_READ_FAILED,
    INGEST_HASH_FILE_CHANGED
} ingest_hash_result;
ingest_hasher *sl__ingest_hasher_new(void);
ingest_hasher *sl__ingest_hasher_of_file(int fd);
bool sl__ingest_hasher_taps(const ingest_hasher *h);
/* A regular file's bytes as the file hasher reads them, for the parser, so
 * the file is read from the kernel once; NULL where the C library cannot
 * make such a stream (the parser then reads the file itself). The stream
 * makes no call on the hasher once it has given its end of file, nor when
 * closed; close it before freeing the hasher, or after finishing it. */
FILE *sl__ingest_hasher_stream(ingest_hasher *h);
int sl__ingest_hasher_add(ingest_hasher *h, const char *bytes, size_t n);
ingest_hash_result sl__ingest_hasher_finish(ingest_hasher *h, char hex[65]);
void sl__ingest_hasher_free(ingest_hasher *h);

/* The devices met at one die (FNV-1a hashes of their names), to hold a die
 * to the plan's wafer_map.devices_per_die. */
typedef struct {
    uint64_t *names;
    uint32_t n, cap;
} ingest_die;

typedef struct {
    sl_store *store;
    sl_diag *diag;
    const sl_ingest_options *opt;
    sl_store_lot lot;
    sl_plan *plan;           /* the stored plan text: names, wafer map, geometry */
    sl_store_revision revision; /* what predict stored: splits, wafers, C_g */
    ingest_wafer *wafers;    /* per plan wafer */
    ingest_die *dies;        /* per plan wafer, die row and die column */
    long *run_ids;           /* per plan temperature: its run of this import */
    long *run_rows;          /* rows read per plan temperature */
    long *run_devices;       /* measurements added per plan temperature (the
                                sweeps' writer thread counts while rows are read) */
    size_t default_temperature; /* for rows without a temperature */
    long first_run_id;       /* this import's runs have ids from this on */
    FILE *in;                /* the file, opened when the import starts (NULL
                                when it cannot be: said when it is needed) */
    FILE *feed;              /* the file through its hasher, or NULL */
    ingest_hasher *hasher;   /* the file's SHA-256 */
    int hash_failed;         /* a block could not be handed over */
    sl_rowsrc *src;
    const char *file;        /* name for messages */
    sl_diag *user_diag;      /* the caller's: at most SL_INGEST_MAX_ERRORS errors */
    long n_errors;           /* problems found in the file */
    FILE *rejects;           /* --keep-going --rejects: rows of rejected devices */
    char *reject_buf;        /* rows of the device being read (with rejects) */
    size_t reject_len, reject_cap;
    ingest_columns col;
    sl_ingest_summary *summary;
    double started_s;
    ingest_batch *batch;
    ingest_density *densities; /* fit configs per gate stack and temperature */
} ingest_ctx;

/* The fit configuration of a device on the plan wafer wafer_index measured
 * at temperature_K (NaN: the plan's first temperature), with the density
 * model the import asked for; made on first use, kept until the import
 * ends. NULL with *status set when the table cannot be made. Not
 * thread-safe: the reading thread asks. */
const sl_fit_config *sl__ingest_fit_for(ingest_ctx *c, size_t wafer_index, double temperature_K,
                                    sl_status *status);
void sl__ingest_density_free(ingest_density *list);

/* Parse and check the identity columns of the current row. */
sl_status sl__ingest_read_row(ingest_ctx *c, ingest_row *row);
/* An optional quantity in SI: NaN when absent or empty. */
sl_status sl__ingest_optional_number(ingest_ctx *c, double *out, sl_row_quantity q);
/* The fit configuration of a device: its wafer's gate with its own channel. */
void sl__ingest_device_fit(const ingest_ctx *c, sl_fit_config *cfg, const ingest_row *row);
/* The store's device type and channel of a row: NULL and NaN when the row
 * gives the plan's device. */
void sl__ingest_row_geometry(const ingest_ctx *c, const ingest_row *row, const char **type,
                         double *length_um, double *width_um);
/* Move the messages found so far to the caller's diagnostics, the first
 * SL_INGEST_MAX_ERRORS errors of the file in full, later ones counted. */
void sl__ingest_flush_errors(ingest_ctx *c);
/* With --rejects: keep the current row's text for the device being read;
 * write the kept rows with reason (the first message of the device's
 * problems) and forget them. */
sl_status sl__ingest_keep_row(ingest_ctx *c);
sl_status sl__ingest_reject_kept(ingest_ctx *c, const char *reason);
/* The same for rows kept elsewhere (len bytes of lines). */
sl_status sl__ingest_reject_rows(ingest_ctx *c, const char *rows, size_t len, const char *reason);
void sl__ingest_forget_kept(ingest_ctx *c);
/* The first error message found for the current row, as a reason. */
const char *sl__ingest_current_reason(const ingest_ctx *c);
/* Report progress every so many rows. */
void sl__ingest_progress(ingest_ctx *c);
double sl__ingest_now_s(void);
/* A located error at the current row; column is the file's (0-based, -1
 * for none). */
void sl__ingest_error_at_row(ingest_ctx *c, long column, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
/* The same at any line, into any diagnostics (the writer thread has its own). */
void sl__ingest_error_at(const ingest_ctx *c, sl_diag *diag, long line, long column,
                     const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 5, 6)))
#endif
    ;
/* The one message for a device stored at another die than in this row. */
sl_status sl__ingest_die_moved(const ingest_ctx *c, sl_diag *diag, long line, const char *device,
                           const char *wafer, const long here[2], const sl_store_insert *stored);
/* Index of a plan wafer by name, -1 when the plan has none. */
long sl__ingest_wafer_index(const ingest_ctx *c, const char *wafer);

sl_status sl__ingest_sweeps(ingest_ctx *c);
void sl__ingest_batch_free(ingest_batch *b);

#endif
