/* SPDX-License-Identifier: MIT
 * The chart module's growable text buffer: appends, printf, XML escaping and
 * compact px numbers (see include/splitlot/chart.h). Memory only, no I/O.
 */
#include "splitlot/chart.h"

#include "chart_internal.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void sl_chart_buf_init(sl_chart_buf *buf)
{
    buf->data = NULL;
    buf->len = 0;
    buf->cap = 0;
    buf->status = SL_OK;
}

void sl_chart_buf_free(sl_chart_buf *buf)
{
    free(buf->data);
    sl_chart_buf_init(buf);
}

const char *sl_chart_buf_str(const sl_chart_buf *buf)
{
    return buf->data ? buf->data : "";
}

char *sl_chart_buf_detach(sl_chart_buf *buf)
{
    char *text = buf->status == SL_OK ? buf->data : NULL;
    if (!text)
        free(buf->data);
    sl_chart_buf_init(buf);
    return text;
}

/* Make room for extra more bytes plus the NUL; doubles to keep appends cheap. */
static sl_status reserve(sl_chart_buf *buf, size_t extra)
{
    if (buf->status != SL_OK)
        return buf->status;
    if (extra > (size_t)-1 / 2 - buf->len) {
        buf->status = SL_ENOMEM;
        return buf->status;
    }
    size_t need = buf->len + extra + 1;
    if (need <= buf->cap)
        return SL_OK;
    size_t cap = buf->cap ? buf->cap : 256;
    while (cap < need)
        cap *= 2;
    char *grown = realloc(buf->data, cap);
    if (!grown) {
        buf->status = SL_ENOMEM;
        return buf->status;
    }
    buf->data = grown;
    buf->cap = cap;
    return SL_OK;
}

static sl_status append_bytes(sl_chart_buf *buf, const char *bytes, size_t n)
{
    if (reserve(buf, n) != SL_OK)
        return buf->status;
    memcpy(buf->data + buf->len, bytes, n);
    buf->len += n;
    buf->data[buf->len] = '\0';
    return SL_OK;
}

sl_status sl_chart_buf_append(sl_chart_buf *buf, const char *text)
{
    if (!text)
        return buf->status;
    return append_bytes(buf, text, strlen(text));
}

sl_status sl_chart_buf_printf(sl_chart_buf *buf, const char *fmt, ...)
{
    if (buf->status != SL_OK)
        return buf->status;
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0)
        return SL_EINPUT;
    if (reserve(buf, (size_t)n) != SL_OK)
        return buf->status;
    va_start(ap, fmt);
    vsnprintf(buf->data + buf->len, (size_t)n + 1, fmt, ap);
    va_end(ap);
    buf->len += (size_t)n;
    return SL_OK;
}

/* The entity for a character that must not appear raw, or NULL. */
static const char *entity_for(char c)
{
    switch (c) {
    case '&': return "&amp;";
    case '<': return "&lt;";
    case '>': return "&gt;";
    case '"': return "&quot;";
    case '\'': return "&#39;";
    default: return NULL;
    }
}

sl_status sl_chart_buf_escape(sl_chart_buf *buf, const char *text)
{
    if (!text)
        return buf->status;
    const char *run = text;
    for (const char *p = text; *p; p++) {
        const char *entity = entity_for(*p);
        if (!entity)
            continue;
        append_bytes(buf, run, (size_t)(p - run));
        sl_chart_buf_append(buf, entity);
        run = p + 1;
    }
    return sl_chart_buf_append(buf, run);
}

sl_chart_num sl__chart_px_text(double value_px)
{
    /* Two decimals are far below a screen pixel; the clamp keeps text short. */
    sl_chart_num out;
    if (!isfinite(value_px))
        value_px = 0.0;
    value_px = fmin(fmax(value_px, -1e7), 1e7);
    long hundredths = lround(value_px * 100.0);
    long whole = labs(hundredths) / 100, frac = labs(hundredths) % 100;
    const char *sign = hundredths < 0 ? "-" : "";
    if (frac == 0)
        snprintf(out.s, sizeof out.s, "%s%ld", sign, whole);
    else if (frac % 10 == 0)
        snprintf(out.s, sizeof out.s, "%s%ld.%ld", sign, whole, frac / 10);
    else
        snprintf(out.s, sizeof out.s, "%s%ld.%02ld", sign, whole, frac);
    return out;
}

sl_status sl_chart_buf_px(sl_chart_buf *buf, double value_px)
{
    return sl_chart_buf_append(buf, sl__chart_px_text(value_px).s);
}
