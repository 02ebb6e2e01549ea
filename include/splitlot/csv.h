/* SPDX-License-Identifier: MIT
 * Streaming RFC 4180 reader for instrument and spreadsheet exports: one record
 * at a time from a large private buffer (flat memory for any file size), a
 * header row mapped to columns by name, zero-copy field access and strict,
 * located number and text parsing. Not for: writing CSV, or knowing what the
 * columns mean (ingest.h does that).
 */
#ifndef SPLITLOT_CSV_H
#define SPLITLOT_CSV_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "splitlot/error.h"

/* Limits of the reader. A record (all physical lines of one row) longer than
 * SL_CSV_MAX_RECORD_BYTES or with more than SL_CSV_MAX_FIELDS fields is an
 * input error naming its line, so hostile input cannot make memory grow. */
#define SL_CSV_MAX_RECORD_BYTES (1024u * 1024u)
#define SL_CSV_MAX_FIELDS 4096u
/* Longest token quoted in an error message; longer tokens are cut with "...". */
#define SL_CSV_QUOTE_MAX 40u

typedef struct sl_csv sl_csv;

/* Open path for reading ("-" reads standard input, named "<stdin>" in
 * messages) and read its header row: the first non-blank record, after an
 * optional UTF-8 byte-order mark. Header names must be valid UTF-8 and
 * distinct; empty names (unnamed spreadsheet columns) are allowed and never
 * matched. A header-only file is fine: the first sl_csv_next ends. Returns SL_OK with *out set, SL_EIO when the file cannot be
 * opened or read, SL_EINPUT for an empty file (no header) or a bad header,
 * SL_ENOMEM. On failure *out is NULL and diag holds the located reason. */
sl_status sl_csv_open(sl_csv **out, const char *path, sl_diag *diag);

/* The same on an already open stream, which the reader does not close; name
 * is used in messages (NULL: "<stream>"). */
sl_status sl_csv_open_stream(sl_csv **out, FILE *stream, const char *name, sl_diag *diag);

/* The same, handing every byte read from the stream, in order, to
 * tap(tap_ctx, bytes, n) as it is read (a checksum of a pipe, say). */
typedef void (*sl_csv_tap)(void *tap_ctx, const char *bytes, size_t n);
sl_status sl_csv_open_stream_tapped(sl_csv **out, FILE *stream, const char *name, sl_csv_tap tap,
                                    void *tap_ctx, sl_diag *diag);

/* Close (if the reader opened the file) and release everything; NULL is fine. */
void sl_csv_free(sl_csv *csv);

/* Name used in messages: the path, "<stdin>" or the stream name. */
const char *sl_csv_name(const sl_csv *csv);

/* The field separator, detected from the header row: the one of ',', ';'
 * and '\t' found there most often outside quotes (',' on a tie or when there
 * is none). Lines starting with '#' before the header are passed over. With
 * ';' or '\t' numbers may use a decimal comma ("1,5"). */
char sl_csv_separator(const sl_csv *csv);

/* Header columns: count, the i-th name (NULL past the end), and the index of
 * a column by exact name, or -1 when the file has no such column. */
size_t sl_csv_column_count(const sl_csv *csv);
const char *sl_csv_column_name(const sl_csv *csv, size_t index);
long sl_csv_column(const sl_csv *csv, const char *name);

/* Read the next record. *has_record is set true with a record available, or
 * false at the end of the data (then SL_OK). Blank lines are skipped. Errors,
 * all SL_EINPUT naming file:line and added to diag: a record whose field
 * count differs from the header's, a record over the size or field limits, a
 * NUL byte, a quote inside an unquoted field, text after a closing quote, a
 * carriage return not followed by a line feed outside quotes, a quote still
 * open at the end of the file. SL_EIO for a read failure. An error is sticky:
 * later calls return it again without adding messages. */
sl_status sl_csv_next(bool *has_record, sl_csv *csv, sl_diag *diag);

/* 1-based physical line number where the current record starts (the header's
 * line before the first sl_csv_next). */
long sl_csv_line(const sl_csv *csv);

/* Number of fields of the current record (equals sl_csv_column_count). */
size_t sl_csv_field_count(const sl_csv *csv);

/* The current record's field, unquoted and unescaped, NUL-terminated, without
 * copying: valid until the next sl_csv_next. *len (if non-NULL) gets its byte
 * length (fields never hold NUL: the reader rejects it). An index past the
 * end gives "" and length 0. Bytes are not validated: use
 * sl_csv_text for fields that are kept as text. */
const char *sl_csv_field(const sl_csv *csv, size_t field, size_t *len);
/* The field's first bytes, at most 8, as a little-endian word (byte i in
 * bits 8i to 8i + 7), the bytes past its end zero; "" beyond the last field.
 * *len gets its byte length. Two short fields are equal when their lengths
 * and words are: one comparison instead of a loop over the bytes. */
uint64_t sl_csv_field_word(const sl_csv *csv, size_t field, size_t *len);

/* True when the field is empty or holds only spaces and tabs. */
bool sl_csv_is_empty(const sl_csv *csv, size_t field);

/* Parse the field as a decimal number: optional sign, digits with an optional
 * point, optional exponent; surrounding spaces and tabs are allowed. Result is
 * correctly rounded to the nearest double; "-0" gives -0.0 and subnormal
 * values (1e-320) are kept. Rejected with SL_EINPUT, message at
 * file:line:field quoting the token: empty field, junk, hexadecimal, nan, inf,
 * a value too large for a double (1e999) and a non-zero value that rounds to
 * zero (1e-999). With a ';' or tab separator a decimal comma is accepted
 * ("-0,25"; not with a point as well). */
sl_status sl_csv_number(double *out, const sl_csv *csv, size_t field, sl_diag *diag);

/* sl_csv_number for a value written in a unit 10^exp10 times its SI unit
 * (exp10 -6 for uA): the SI value, rounded once from the decimal text, so
 * "2.5" at -6 gives exactly the double nearest 2.5e-6. Same errors. */
sl_status sl_csv_number_e(double *out, const sl_csv *csv, size_t field, int exp10,
                          sl_diag *diag);

/* The field as text for keeping (names, ids): checks it is valid UTF-8
 * (no overlong forms, surrogates or code points past U+10FFFF), has no control
 * characters other than tab, and is at most max_bytes long. *out points into
 * the reader's buffer like sl_csv_field. SL_EINPUT with a located message
 * otherwise. */
sl_status sl_csv_text(const char **out, size_t *len, const sl_csv *csv, size_t field,
                      size_t max_bytes, sl_diag *diag);

/* Check a byte string is valid UTF-8 (same rules as sl_csv_text, control
 * characters allowed). Shared by other text readers. */
bool sl_csv_utf8_valid(const char *bytes, size_t len);

/* Parse a whole NUL-terminated token with the rules of sl_csv_number; returns
 * false (and leaves *out alone) when it is not a valid finite number. */
bool sl_csv_parse_double(double *out, const char *token, size_t len);

/* The same scaled by 10^exp10 and rounded once, with a decimal comma
 * accepted when decimal_comma is true. */
bool sl_csv_parse_double_e(double *out, const char *token, size_t len, int exp10,
                           bool decimal_comma);

#endif
