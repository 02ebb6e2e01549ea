/* SPDX-License-Identifier: MIT
 * Row source: what stands between a measurement file and the import. It opens
 * the file (separator detected, decimal comma with ';' or tab), maps header
 * names to the quantities of a measurement (canonical names, a quantity with
 * its unit such as "Id (uA)", or --columns mappings) and hands the import
 * each row's values in SI. Not for: checking a row against the lot (ingest.h
 * does that). A second input format plugs in here.
 */
#ifndef SPLITLOT_ROWSRC_H
#define SPLITLOT_ROWSRC_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "splitlot/csv.h"
#include "splitlot/error.h"

/* The quantities of a measurement file, by their canonical column names. */
typedef enum {
    SL_ROW_WAFER = 0,   /* wafer */
    SL_ROW_DEVICE,      /* device */
    SL_ROW_DIE_X,       /* die_x */
    SL_ROW_DIE_Y,       /* die_y */
    SL_ROW_VG,          /* vg_V */
    SL_ROW_R,           /* r_ohm */
    SL_ROW_ID,          /* id_A */
    SL_ROW_VD,          /* vd_V */
    SL_ROW_VCNP,        /* v_cnp_V */
    SL_ROW_MOBILITY,    /* mobility_cm2_per_Vs */
    SL_ROW_N0,          /* n0_per_cm2 */
    SL_ROW_R_CONTACT,   /* r_contact_ohm */
    SL_ROW_HYSTERESIS,  /* hysteresis_V */
    SL_ROW_TEMPERATURE, /* temperature_K */
    SL_ROW_DIRECTION,   /* direction: forward or reverse */
    SL_ROW_COMPLIANCE,  /* compliance: true/1 or false/0 */
    SL_ROW_DEVICE_TYPE, /* device_type */
    SL_ROW_LENGTH,      /* channel_length_um */
    SL_ROW_WIDTH,       /* channel_width_um */
    SL_ROW_COUNT
} sl_row_quantity;

/* A set of quantities: bit q for quantity q. */
typedef unsigned long sl_row_set;
#define SL_ROW_BIT(q) (1ul << (q))

/* A value at or beyond this magnitude, in the unit the file writes, is an
 * instrument's overflow code (9.9e37 is the code of common source-meters,
 * common practice), not a reading. */
#define SL_ROW_OVERFLOW 9.9e37

typedef struct sl_rowsrc sl_rowsrc;

/* Open path ("-": standard input) and map its header. columns is NULL or a
 * list of extra mappings "QUANTITY=COLUMN[,...]", the quantity written as a
 * column name could be (vg_V, id_uA, "Vd [mV]"), the column by its header
 * name (exactly, else without regard to case). A header name maps to a
 * quantity when it is the canonical name in any case (VG_V), a name with a
 * unit suffix (id_uA), or a name with its unit in brackets or parentheses
 * ("Vg [V]", "Id (uA)", "R [kOhm]", "T [K]"); units from
 * sl_units_exp10. Errors (SL_EINPUT, located at the header or naming the
 * mapping): a mapping that is malformed, names no quantity or no column, a
 * known quantity with an unknown unit, two columns giving one quantity. Also
 * sl_csv_open's statuses. *out is NULL on failure. */
sl_status sl_rowsrc_open(sl_rowsrc **out, const char *path, const char *columns, sl_diag *diag);

/* The same on an open stream, which the row source does not close; name is
 * used in messages. */
sl_status sl_rowsrc_open_stream(sl_rowsrc **out, FILE *stream, const char *name,
                                const char *columns, sl_diag *diag);

/* The same with every byte of the stream shown to tap as it is read (see
 * sl_csv_open_stream_tapped; tap may be NULL). */
sl_status sl_rowsrc_open_stream_tapped(sl_rowsrc **out, FILE *stream, const char *name,
                                       const char *columns, sl_csv_tap tap, void *tap_ctx,
                                       sl_diag *diag);

void sl_rowsrc_free(sl_rowsrc *src);

/* The reader underneath (for raw fields and line numbers). */
sl_csv *sl_rowsrc_csv(const sl_rowsrc *src);
const char *sl_rowsrc_name(const sl_rowsrc *src);
/* The separator detected: ',', ';' or '\t'. */
char sl_rowsrc_separator(const sl_rowsrc *src);

/* File column of a quantity (0-based), -1 when the file does not give it. */
long sl_rowsrc_column(const sl_rowsrc *src, sl_row_quantity q);
bool sl_rowsrc_has(const sl_rowsrc *src, sl_row_quantity q);

/* Canonical column name of a quantity ("vg_V"). */
const char *sl_rowsrc_quantity_name(sl_row_quantity q);

/* Check the file gives every quantity of need and record which the caller
 * will read (want, a superset of need): the rest of its columns are
 * reported by sl_rowsrc_unused. Each missing quantity is an SL_EINPUT error
 * at the header naming it, with needs (e.g. "a sweeps file needs ...") and a
 * did-you-mean among the file's unmapped columns; then one note lists the
 * columns found and the separator. */
sl_status sl_rowsrc_require(sl_rowsrc *src, sl_row_set need, sl_row_set want, const char *needs,
                            sl_diag *diag);

/* Header names of the columns nobody reads, in file order (after
 * sl_rowsrc_require): count and the i-th (NULL past the end). */
size_t sl_rowsrc_unused_count(const sl_rowsrc *src);
const char *sl_rowsrc_unused(const sl_rowsrc *src, size_t i);

/* Next data row, as sl_csv_next. */
sl_status sl_rowsrc_next(bool *has_row, sl_rowsrc *src, sl_diag *diag);
long sl_rowsrc_line(const sl_rowsrc *src);

/* The quantity's field in the current row, raw ("" when the file lacks it),
 * and checked as kept text (sl_csv_text's rules, at most max_bytes). */
const char *sl_rowsrc_field(const sl_rowsrc *src, sl_row_quantity q, size_t *len);
/* The same as sl_csv_field_word gives it (0 and length 0 when the file
 * lacks the quantity). */
uint64_t sl_rowsrc_field_word(const sl_rowsrc *src, sl_row_quantity q, size_t *len);
sl_status sl_rowsrc_text(const char **out, size_t *len, const sl_rowsrc *src, sl_row_quantity q,
                         size_t max_bytes, sl_diag *diag);

/* Append the header (which_row 0) or the current row (1) to a growing
 * buffer as the file wrote it: fields joined by its separator, quoted where
 * they must be, then extra (already a field, or NULL) and a line feed.
 * Returns 0, or -1 when out of memory. */
int sl_rowsrc_format(char **buf, size_t *len, size_t *cap, const sl_rowsrc *src, int which_row,
                     const char *extra);

/* The quantity's value in the current row in SI (its canonical unit), as
 * sl_csv_number_e (errors located at the field). The quantity must be in
 * the file. */
sl_status sl_rowsrc_number(double *out, const sl_rowsrc *src, sl_row_quantity q, sl_diag *diag);

/* sl_rowsrc_number for a quantity that seldom changes from row to row (a
 * drain bias): when the field's text is the last one read, its value is
 * reused without parsing. */
sl_status sl_rowsrc_number_repeated(double *out, sl_rowsrc *src, sl_row_quantity q,
                                    sl_diag *diag);

/* The same, NaN when the file lacks the quantity or the field is empty. */
sl_status sl_rowsrc_optional(double *out, const sl_rowsrc *src, sl_row_quantity q,
                             sl_diag *diag);

/* True when the value just read was an instrument overflow in the unit of
 * the file (|written value| >= SL_ROW_OVERFLOW). */
bool sl_rowsrc_is_overflow(const sl_rowsrc *src, sl_row_quantity q, double si_value);
/* The least |SI value| sl_rowsrc_is_overflow takes for an overflow of q,
 * for a check made by the caller on every point. */
double sl_rowsrc_overflow_si(const sl_rowsrc *src, sl_row_quantity q);

/* A flag column (compliance): true for "true", "1", "yes"; false for
 * "false", "0", "no" or empty (any case), or when the file lacks it;
 * SL_EINPUT otherwise. */
sl_status sl_rowsrc_flag(bool *out, const sl_rowsrc *src, sl_row_quantity q, sl_diag *diag);

/* The sweep direction column: +1 forward, -1 reverse, 0 when the file has
 * no such column; SL_EINPUT for any other text (an empty field included). */
sl_status sl_rowsrc_direction(int *out, const sl_rowsrc *src, sl_diag *diag);

#endif
