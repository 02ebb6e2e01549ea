/* SPDX-License-Identifier: MIT
 * Status codes and the diagnostics collector shared by every module.
 * A validator adds one located message per problem and carries on, so the
 * user sees all problems at once. Nothing here prints; the command layer does.
 */
#ifndef SPLITLOT_ERROR_H
#define SPLITLOT_ERROR_H

#include <stddef.h>

/* Status returned by every fallible library function. */
typedef enum {
    SL_OK = 0,
    SL_EINPUT,  /* bad user input: plan, CSV, option value */
    SL_EIO,     /* file could not be read or written */
    SL_EDB,     /* database failure */
    SL_ENOMEM,  /* allocation failed */
    SL_ENUM,    /* numerical failure: no convergence, no bracket */
    SL_ENOTFOUND /* a named lot, split or file does not exist */
} sl_status;

typedef enum { SL_SEV_ERROR = 0, SL_SEV_WARNING, SL_SEV_NOTE } sl_severity;

/* One located message. line and col are 1-based; 0 means "not known". */
typedef struct {
    sl_severity severity;
    char *file;
    long line;
    long col;
    char *text;
} sl_diag_msg;

typedef struct sl_diag sl_diag;

/* A new, empty collector, or NULL when out of memory. */
sl_diag *sl_diag_new(void);
void sl_diag_free(sl_diag *diag);

/* Append a message; file may be NULL. Formatting is printf-like. A failed
 * allocation is remembered (sl_diag_count still counts the message) so the
 * caller never loses track of an error. diag may be NULL (message dropped). */
void sl_diag_add(sl_diag *diag, sl_severity sev, const char *file, long line,
                 long col, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 6, 7)))
#endif
    ;

/* Shorthand for an error without a location. */
void sl_diag_error(sl_diag *diag, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Number of messages of a severity. */
size_t sl_diag_count(const sl_diag *diag, sl_severity sev);
/* Total messages of every severity. */
size_t sl_diag_size(const sl_diag *diag);
/* The i-th message in order of addition, or NULL past the end. */
const sl_diag_msg *sl_diag_get(const sl_diag *diag, size_t i);
/* Text of the most recent error (or message), "" when none; never NULL. */
const char *sl_diag_last(const sl_diag *diag);
/* Drop all messages. */
void sl_diag_clear(sl_diag *diag);
/* Drop the messages added after the first size ones (what a call added, so
 * a library function never clears what its caller had collected). */
void sl_diag_truncate(sl_diag *diag, size_t size);
/* Sort messages by file, line, column (stable), for readable output. */
void sl_diag_sort(sl_diag *diag);

/* Format a message as "file:line:col: error: text" (parts without a value
 * left out) into buf; returns what snprintf returns. */
int sl_diag_format(const sl_diag_msg *msg, char *buf, size_t size);

/* Short English name of a status ("input error", ...); never NULL. */
const char *sl_status_str(sl_status st);

/* Process exit code for a status: 0 ok, 2 input, 1 otherwise. */
int sl_status_exit_code(sl_status st);

#endif
