/* SPDX-License-Identifier: MIT
 * Diagnostics collector and status names (see include/splitlot/error.h).
 * Holds messages in a growable array; never prints.
 */
#include "splitlot/error.h"

#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

struct sl_diag {
    sl_diag_msg *msgs;
    size_t len, cap;
    size_t lost[3]; /* messages that could not be stored, per severity */
};

sl_diag *sl_diag_new(void) { return calloc(1, sizeof(sl_diag)); }

void sl_diag_clear(sl_diag *diag)
{
    if (!diag)
        return;
    for (size_t i = 0; i < diag->len; i++) {
        free(diag->msgs[i].file);
        free(diag->msgs[i].text);
    }
    diag->len = 0;
    memset(diag->lost, 0, sizeof diag->lost);
}

void sl_diag_truncate(sl_diag *diag, size_t size)
{
    if (!diag)
        return;
    for (size_t i = size; i < diag->len; i++) {
        free(diag->msgs[i].file);
        free(diag->msgs[i].text);
    }
    if (size < diag->len)
        diag->len = size;
}

void sl_diag_free(sl_diag *diag)
{
    if (!diag)
        return;
    sl_diag_clear(diag);
    free(diag->msgs);
    free(diag);
}

static char *dup_string(const char *s)
{
    if (!s)
        return NULL;
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

static char *vformat(const char *fmt, va_list ap)
{
    va_list ap2;
    va_copy(ap2, ap);
    int n = vsnprintf(NULL, 0, fmt, ap2);
    va_end(ap2);
    if (n < 0)
        return NULL;
    char *s = malloc((size_t)n + 1);
    if (s)
        vsnprintf(s, (size_t)n + 1, fmt, ap);
    return s;
}

static void add_v(sl_diag *diag, sl_severity sev, const char *file, long line,
                  long col, const char *fmt, va_list ap)
{
    if (!diag)
        return;
    if (diag->len == diag->cap) {
        size_t cap = diag->cap ? diag->cap * 2 : 8;
        sl_diag_msg *m = realloc(diag->msgs, cap * sizeof *m);
        if (!m) {
            diag->lost[sev]++;
            return;
        }
        diag->msgs = m;
        diag->cap = cap;
    }
    sl_diag_msg *m = &diag->msgs[diag->len];
    m->severity = sev;
    m->file = dup_string(file);
    m->line = line;
    m->col = col;
    m->text = vformat(fmt, ap);
    if (!m->text) {
        free(m->file);
        diag->lost[sev]++;
        return;
    }
    diag->len++;
}

void sl_diag_add(sl_diag *diag, sl_severity sev, const char *file, long line,
                 long col, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    add_v(diag, sev, file, line, col, fmt, ap);
    va_end(ap);
}

void sl_diag_error(sl_diag *diag, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    add_v(diag, SL_SEV_ERROR, NULL, 0, 0, fmt, ap);
    va_end(ap);
}

size_t sl_diag_count(const sl_diag *diag, sl_severity sev)
{
    if (!diag)
        return 0;
    size_t n = diag->lost[sev];
    for (size_t i = 0; i < diag->len; i++)
        n += diag->msgs[i].severity == sev;
    return n;
}

size_t sl_diag_size(const sl_diag *diag) { return diag ? diag->len : 0; }

const sl_diag_msg *sl_diag_get(const sl_diag *diag, size_t i)
{
    return (diag && i < diag->len) ? &diag->msgs[i] : NULL;
}

const char *sl_diag_last(const sl_diag *diag)
{
    if (!diag || diag->len == 0)
        return (diag && diag->lost[SL_SEV_ERROR]) ? "out of memory" : "";
    for (size_t i = diag->len; i-- > 0;)
        if (diag->msgs[i].severity == SL_SEV_ERROR)
            return diag->msgs[i].text;
    return diag->msgs[diag->len - 1].text;
}

static int compare_msgs(const sl_diag_msg *a, const sl_diag_msg *b)
{
    int c = strcmp(a->file ? a->file : "", b->file ? b->file : "");
    if (c)
        return c;
    if (a->line != b->line)
        return a->line < b->line ? -1 : 1;
    if (a->col != b->col)
        return a->col < b->col ? -1 : 1;
    return 0;
}

void sl_diag_sort(sl_diag *diag)
{
    if (!diag)
        return;
    /* insertion sort: stable, and message lists are short */
    for (size_t i = 1; i < diag->len; i++) {
        sl_diag_msg key = diag->msgs[i];
        size_t j = i;
        while (j > 0 && compare_msgs(&diag->msgs[j - 1], &key) > 0) {
            diag->msgs[j] = diag->msgs[j - 1];
            j--;
        }
        diag->msgs[j] = key;
    }
}

static const char *severity_word(sl_severity sev)
{
    switch (sev) {
    case SL_SEV_ERROR: return "error";
    case SL_SEV_WARNING: return "warning";
    default: return "note";
    }
}

int sl_diag_format(const sl_diag_msg *msg, char *buf, size_t size)
{
    char loc[512] = "";
    if (msg->file && msg->line > 0 && msg->col > 0)
        snprintf(loc, sizeof loc, "%s:%ld:%ld: ", msg->file, msg->line, msg->col);
    else if (msg->file && msg->line > 0)
        snprintf(loc, sizeof loc, "%s:%ld: ", msg->file, msg->line);
    else if (msg->file)
        snprintf(loc, sizeof loc, "%s: ", msg->file);
    return snprintf(buf, size, "%s%s: %s", loc, severity_word(msg->severity), msg->text);
}

const char *sl_status_str(sl_status st)
{
    switch (st) {
    case SL_OK: return "ok";
    case SL_EINPUT: return "input error";
    case SL_EIO: return "i/o error";
    case SL_EDB: return "database error";
    case SL_ENOMEM: return "out of memory";
    case SL_ENUM: return "numerical failure";
    case SL_ENOTFOUND: return "not found";
    }
    return "unknown status";
}

int sl_status_exit_code(sl_status st)
{
    if (st == SL_OK)
        return 0;
    if (st == SL_EINPUT || st == SL_ENOTFOUND)
        return 2;
    return 1;
}
