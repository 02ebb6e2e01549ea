/* SPDX-License-Identifier: MIT
 * Streaming RFC 4180 reader (see include/splitlot/csv.h). The common record
 * (unquoted fields, LF or CRLF end, wholly in the buffer) is split in one pass
 * eight bytes at a time and NUL-terminated as it goes; any other record goes
 * to the general scanner, which does not touch the buffer, so a scan cut
 * short by the end of the buffer can restart after a refill, and unescapes a
 * complete record in place. Numbers take correctly rounded fast paths.
 */
#include "splitlot/csv.h"

#include <float.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define READ_CHUNK_BYTES (1024u * 1024u)
#define DATA_BYTES (SL_CSV_MAX_RECORD_BYTES + READ_CHUNK_BYTES)
/* One read takes at most this much: what it brought is parsed while still in
 * the core's cache, and the first rows of a file are handed on sooner. */
#define READ_STEP_BYTES (128u * 1024u)
/* Eight-byte words are loaded at any data position up to the NUL kept after
 * the data (the sentinel that ends the fast record scan); the buffer has
 * room for the last one. */
#define WORD_BYTES 8u
#define BUFFER_BYTES (DATA_BYTES + 1u + WORD_BYTES)

typedef struct {
    size_t off;   /* offset in buf: raw field while scanning, content after */
    size_t len;
    bool quoted;
} field_span;

struct sl_csv {
    FILE *stream;
    bool owns_stream;
    char *name;
    char *buf;
    size_t pos, end;        /* unread data is buf[pos, end) */
    bool eof;
    long next_line;         /* physical line at buf[pos] */
    long record_line;
    field_span *fields;
    size_t n_fields;
    char **columns;
    size_t n_columns;
    sl_status sticky;
    char sep;               /* ',', ';' or '\t', detected from the header */
    bool decimal_comma;     /* "1,5" accepted (separator ';' or tab) */
    const unsigned char *stop; /* stop bytes of unquoted runs for sep */
    sl_csv_tap tap;         /* sees every byte read, in order; may be NULL */
    void *tap_ctx;
};

typedef enum { SCAN_RECORD, SCAN_BLANK, SCAN_END, SCAN_MORE, SCAN_ERROR } scan_result;

/* Scanner state for one record attempt. */
typedef struct {
    const char *start, *p, *limit;
    long newlines;
    size_t n_fields;
    bool finished;   /* fields unescaped and NUL-terminated already */
} scan_state;

/* Bytes that end an unquoted run: separator, line ends, quote, NUL; one
 * table per separator. Line ends, quote and NUL are below QUOTE_LIMIT; with
 * a comma all stop bytes are below COMMA_LIMIT, which the comma scan relies
 * on (one comparison per word); a semicolon is found by equality. */
static const unsigned char stop_comma[256] = {
    [','] = 1, ['\n'] = 1, ['\r'] = 1, ['"'] = 1, [0] = 1,
};
static const unsigned char stop_semicolon[256] = {
    [';'] = 1, ['\n'] = 1, ['\r'] = 1, ['"'] = 1, [0] = 1,
};
static const unsigned char stop_tab[256] = {
    ['\t'] = 1, ['\n'] = 1, ['\r'] = 1, ['"'] = 1, [0] = 1,
};
#define COMMA_LIMIT (',' + 1u)
#define QUOTE_LIMIT ('"' + 1u)

/* Keeps a rarely taken path out of its caller, so the caller's common path
 * needs no stack frame. */
#if defined(__GNUC__)
#define OUT_OF_LINE __attribute__((noinline))
#else
#define OUT_OF_LINE
#endif

/* ---- eight bytes at a time: a uint64_t holds p[0] in its lowest byte ---- */

#define BYTES_01 UINT64_C(0x0101010101010101)
#define BYTES_7F UINT64_C(0x7F7F7F7F7F7F7F7F)
#define BYTES_80 UINT64_C(0x8080808080808080)

/* Little-endian by construction; compilers make it one load. */
static uint64_t load_word(const unsigned char *p)
{
    return (uint64_t)p[0] | (uint64_t)p[1] << 8 | (uint64_t)p[2] << 16 | (uint64_t)p[3] << 24 |
           (uint64_t)p[4] << 32 | (uint64_t)p[5] << 40 | (uint64_t)p[6] << 48 |
           (uint64_t)p[7] << 56;
}

/* The high bit of each byte set where that byte is below limit (at most
 * 0x80): with the top bit cleared, adding 0x80 - limit cannot carry out of
 * the byte and reaches its high bit exactly when the byte is >= limit. */
static uint64_t bytes_below(uint64_t word, unsigned limit)
{
    uint64_t at_least = (word & BYTES_7F) + BYTES_01 * (0x80u - limit);
    return ~(at_least | word) & BYTES_80;
}

/* Index of the first flagged byte of a non-zero mask of byte high bits. */
static unsigned first_flagged_byte(uint64_t mask)
{
#if defined(__GNUC__)
    return (unsigned)__builtin_ctzll(mask) / 8u;
#else
    unsigned i = 0;
    for (; !(mask & 0x80u); mask >>= 8)
        i++;
    return i;
#endif
}

static char *copy_string(const char *s, size_t len)
{
    char *d = malloc(len + 1);
    if (d) {
        memcpy(d, s, len);
        d[len] = '\0';
    }
    return d;
}

/* Printable, shortened copy of a token for messages. */
static void quote_token(char out[SL_CSV_QUOTE_MAX + 4], const char *s, size_t len)
{
    size_t n = len > SL_CSV_QUOTE_MAX ? SL_CSV_QUOTE_MAX : len;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)s[i];
        out[i] = (c < 0x20 || c == 0x7f || c >= 0x80) ? '?' : (char)c;
    }
    if (len > n) {
        memcpy(out + n, "...", 3);
        n += 3;
    }
    out[n] = '\0';
}

static sl_status fail(sl_csv *csv, sl_status st, sl_diag *diag, long line, long col,
                      const char *what)
{
    sl_diag_add(diag, SL_SEV_ERROR, csv->name, line, col, "%s", what);
    csv->sticky = st;
    return st;
}

static sl_status refill(sl_csv *csv, sl_diag *diag)
{
    size_t keep = csv->end - csv->pos;
    memmove(csv->buf, csv->buf + csv->pos, keep);
    csv->pos = 0;
    csv->end = keep;
    size_t want = DATA_BYTES - keep;
    if (want > READ_STEP_BYTES)
        want = READ_STEP_BYTES;
    size_t got = fread(csv->buf + keep, 1, want, csv->stream);
    if (csv->tap && got)
        csv->tap(csv->tap_ctx, csv->buf + keep, got);
    csv->end += got;
    csv->buf[csv->end] = '\0';   /* the sentinel */
    if (got < want) {
        if (ferror(csv->stream))
            return fail(csv, SL_EIO, diag, 0, 0, "read failed");
        csv->eof = true;
    }
    return SL_OK;
}

static bool add_span(sl_csv *csv, scan_state *s, const char *from, const char *to, bool quoted)
{
    if (s->n_fields == SL_CSV_MAX_FIELDS)
        return false;
    field_span *f = &csv->fields[s->n_fields++];
    f->off = (size_t)(from - csv->buf);
    f->len = (size_t)(to - from);
    f->quoted = quoted;
    return true;
}

typedef enum { STEP_OK, STEP_MORE, STEP_ERROR } step_result;

/* Scan a quoted field starting at s->p (on the opening quote). */
static step_result scan_quoted(sl_csv *csv, scan_state *s, const char **why)
{
    const char *q = s->p + 1;
    long opened_on = s->newlines;
    for (;;) {
        const char *hit = memchr(q, '"', (size_t)(s->limit - q));
        const char *stop = hit ? hit : s->limit;
        for (const char *c = memchr(q, '\n', (size_t)(stop - q)); c;
             c = memchr(c + 1, '\n', (size_t)(stop - c - 1)))
            s->newlines++;
        if (memchr(q, '\0', (size_t)(stop - q))) {
            *why = "NUL byte in a quoted field";
            return STEP_ERROR;
        }
        if (!hit) {
            *why = "quoted field opened on this line is not closed before the end of the file";
            s->newlines = opened_on;
            return csv->eof ? STEP_ERROR : STEP_MORE;
        }
        if (hit + 1 == s->limit && !csv->eof)
            return STEP_MORE;
        if (hit + 1 < s->limit && hit[1] == '"') {
            q = hit + 2;
            continue;
        }
        if (!add_span(csv, s, s->p, hit + 1, true)) {
            *why = "too many fields in the record";
            return STEP_ERROR;
        }
        s->p = hit + 1;
        return STEP_OK;
    }
}

static step_result scan_unquoted(sl_csv *csv, scan_state *s, const char **why)
{
    const char *p = s->p;
    while (p < s->limit && !csv->stop[(unsigned char)*p])
        p++;
    if (p == s->limit && !csv->eof)
        return STEP_MORE;
    if (p < s->limit && *p == '"') {
        *why = "quote inside an unquoted field";
        return STEP_ERROR;
    }
    if (p < s->limit && *p == '\0') {
        *why = "NUL byte in the data";
        return STEP_ERROR;
    }
    if (!add_span(csv, s, s->p, p, false)) {
        *why = "too many fields in the record";
        return STEP_ERROR;
    }
    s->p = p;
    return STEP_OK;
}

/* After a field: separator, line end or end of file. *done is set at the end
 * of the record. */
static step_result scan_separator(sl_csv *csv, scan_state *s, bool *done, const char **why)
{
    if (s->p == s->limit) {
        *done = true;   /* only reached at end of file */
        return STEP_OK;
    }
    char c = *s->p;
    if (c == csv->sep) {
        s->p++;
        return STEP_OK;
    }
    if (c == '\n') {
        s->p++;
        s->newlines++;
        *done = true;
        return STEP_OK;
    }
    if (c == '\r') {
        if (s->p + 1 == s->limit && !csv->eof)
            return STEP_MORE;
        if (s->p + 1 < s->limit && s->p[1] == '\n') {
            s->p += 2;
            s->newlines++;
            *done = true;
            return STEP_OK;
        }
        *why = "carriage return not followed by a line feed";
        return STEP_ERROR;
    }
    *why = "unexpected text after a closing quote";
    return STEP_ERROR;
}

/* Put back the separators scan_plain_record replaced by NULs in its first n fields. */
static void restore_separators(sl_csv *csv, size_t n)
{
    for (size_t i = 0; i < n; i++)
        csv->buf[csv->fields[i].off + csv->fields[i].len] = csv->sep;
}

static void set_plain_span(field_span *f, const unsigned char *buf, const unsigned char *from,
                           const unsigned char *stop)
{
    f->off = (size_t)(from - buf);
    f->len = (size_t)(stop - from);
    f->quoted = false;
}

/* Candidate stop bytes of a word for separator sep (a constant once
 * inlined): with a comma every stop byte is below COMMA_LIMIT; with a tab
 * below QUOTE_LIMIT; a semicolon is flagged by equality (a zero byte after
 * the exclusive or), the rest below QUOTE_LIMIT. Candidates that are no stop
 * byte (a space, say) are passed over by the caller. */
#if defined(__GNUC__)
__attribute__((always_inline))
#endif
static inline uint64_t candidates(uint64_t word, unsigned char sep)
{
    if (sep == ',')
        return bytes_below(word, COMMA_LIMIT);
    if (sep == '\t')
        return bytes_below(word, QUOTE_LIMIT);
    return bytes_below(word, QUOTE_LIMIT) | bytes_below(word ^ (BYTES_01 * sep), 1u);
}

/* The common record in one pass: unquoted fields ending in LF or CRLF,
 * wholly in the buffer. Eight bytes at a time, the candidate stop bytes are
 * found at once and taken in order: a separator ends a field (and becomes
 * its NUL), another stop byte ends the record, a candidate that is no stop is
 * passed over. The sentinel after the data guarantees an end. For anything
 * but LF or CRLF there (a quote, a lone CR, a NUL, the sentinel) or too many
 * fields, the separators are put back and false returned: the general scan
 * starts over. Inlined once per separator, so each has its own constants. */
#if defined(__GNUC__)
__attribute__((always_inline))
#endif
static inline bool scan_plain_with(sl_csv *csv, scan_state *s, unsigned char sep,
                                   const unsigned char *stop_byte)
{
    unsigned char *const buf = (unsigned char *)csv->buf;
    field_span *f = csv->fields, *const last = csv->fields + SL_CSV_MAX_FIELDS - 1;
    unsigned char *from = buf + csv->pos, *stop = NULL;
    for (unsigned char *word = from; !stop; word += 8) {
        for (uint64_t c = candidates(load_word(word), sep); c; c &= c - 1) {
            unsigned char *q = word + first_flagged_byte(c);
            if (*q != sep) {
                if (!stop_byte[*q])
                    continue;
                stop = q;
                break;
            }
            if (f == last) {
                restore_separators(csv, SL_CSV_MAX_FIELDS - 1);
                return false;
            }
            set_plain_span(f++, buf, from, q);
            *q = '\0';
            from = q + 1;
        }
    }
    set_plain_span(f++, buf, from, stop);
    size_t n = (size_t)(f - csv->fields);
    size_t end_bytes = *stop == '\n' ? 1 : *stop == '\r' && stop[1] == '\n' ? 2 : 0;
    if (end_bytes == 0) {
        restore_separators(csv, n - 1);
        return false;
    }
    *stop = '\0';
    s->p = (const char *)stop + end_bytes;
    s->newlines = 1;
    s->n_fields = n;
    s->finished = true;
    return true;
}

static bool scan_plain_record(sl_csv *csv, scan_state *s)
{
    switch (csv->sep) {
    case ';': return scan_plain_with(csv, s, ';', stop_semicolon);
    case '\t': return scan_plain_with(csv, s, '\t', stop_tab);
    default: return scan_plain_with(csv, s, ',', stop_comma);
    }
}

static scan_result scan_record(sl_csv *csv, scan_state *s, const char **why)
{
    s->start = s->p = csv->buf + csv->pos;
    s->limit = csv->buf + csv->end;
    s->newlines = 0;
    s->n_fields = 0;
    s->finished = false;
    if (s->p == s->limit)
        return csv->eof ? SCAN_END : SCAN_MORE;
    if (scan_plain_record(csv, s))
        return s->n_fields == 1 && csv->fields[0].len == 0 ? SCAN_BLANK : SCAN_RECORD;
    for (bool done = false; !done;) {
        step_result r = (s->p < s->limit && *s->p == '"') ? scan_quoted(csv, s, why)
                                                           : scan_unquoted(csv, s, why);
        if (r == STEP_OK)
            r = scan_separator(csv, s, &done, why);
        if (r != STEP_OK)
            return r == STEP_MORE ? SCAN_MORE : SCAN_ERROR;
    }
    bool blank = s->n_fields == 1 && csv->fields[0].len == 0 && !csv->fields[0].quoted;
    return blank ? SCAN_BLANK : SCAN_RECORD;
}

/* Unescape quoted fields in place and NUL-terminate every field. Unquoted
 * fields end on a separator byte (or the spare byte after the data). */
static void finish_record(sl_csv *csv, size_t n_fields)
{
    for (size_t i = 0; i < n_fields; i++) {
        field_span *f = &csv->fields[i];
        char *s = csv->buf + f->off;
        if (!f->quoted) {
            s[f->len] = '\0';
            continue;
        }
        char *from = s + 1, *stop = s + f->len - 1, *to = s + 1;
        while (from < stop) {
            if (*from == '"')
                from++;   /* first of a doubled quote */
            *to++ = *from++;
        }
        *to = '\0';
        f->off += 1;
        f->len = (size_t)(to - (s + 1));
    }
    csv->n_fields = n_fields;
}

static sl_status too_long(sl_csv *csv, sl_diag *diag)
{
    char what[96];
    snprintf(what, sizeof what, "record longer than %u bytes", SL_CSV_MAX_RECORD_BYTES);
    return fail(csv, SL_EINPUT, diag, csv->next_line, 0, what);
}

/* Read one non-blank record into csv->fields, any field count. */
static sl_status read_record(bool *has_record, sl_csv *csv, sl_diag *diag)
{
    *has_record = false;
    for (;;) {
        scan_state s;
        const char *why = "";
        scan_result r = scan_record(csv, &s, &why);
        size_t scanned = (size_t)(s.p - s.start);
        if (r == SCAN_MORE) {
            if (csv->end - csv->pos > SL_CSV_MAX_RECORD_BYTES)
                return too_long(csv, diag);
            sl_status st = refill(csv, diag);
            if (st != SL_OK)
                return st;
            continue;
        }
        if (r == SCAN_ERROR)
            return fail(csv, SL_EINPUT, diag, csv->next_line + s.newlines, 0, why);
        if (r == SCAN_END)
            return SL_OK;
        if (scanned > SL_CSV_MAX_RECORD_BYTES)
            return too_long(csv, diag);
        csv->record_line = csv->next_line;
        csv->next_line += s.newlines;
        csv->pos += scanned;
        if (r == SCAN_BLANK)
            continue;
        if (s.finished)
            csv->n_fields = s.n_fields;
        else
            finish_record(csv, s.n_fields);
        *has_record = true;
        return SL_OK;
    }
}

sl_status sl_csv_next(bool *has_record, sl_csv *csv, sl_diag *diag)
{
    *has_record = false;
    if (csv->sticky != SL_OK)
        return csv->sticky;
    sl_status st = read_record(has_record, csv, diag);
    if (st != SL_OK || !*has_record || csv->n_fields == csv->n_columns)
        return st;
    *has_record = false;
    sl_diag_add(diag, SL_SEV_ERROR, csv->name, csv->record_line, 0,
                "expected %zu fields as in the header, found %zu", csv->n_columns,
                csv->n_fields);
    csv->sticky = SL_EINPUT;
    return SL_EINPUT;
}

static void skip_bom(sl_csv *csv)
{
    if (csv->end - csv->pos >= 3 && memcmp(csv->buf + csv->pos, "\xEF\xBB\xBF", 3) == 0)
        csv->pos += 3;
}

static sl_status check_header_name(sl_csv *csv, size_t i, sl_diag *diag)
{
    const char *name = csv->columns[i];
    size_t len = strlen(name);
    if (!sl_csv_utf8_valid(name, len))
        return fail(csv, SL_EINPUT, diag, csv->record_line, (long)i + 1,
                    "header name is not valid UTF-8");
    for (size_t j = 0; len > 0 && j < i; j++) {
        if (strcmp(csv->columns[j], name) == 0) {
            char tok[SL_CSV_QUOTE_MAX + 4];
            quote_token(tok, name, len);
            sl_diag_add(diag, SL_SEV_ERROR, csv->name, csv->record_line, (long)i + 1,
                        "duplicate column \"%s\" (also column %zu)", tok, j + 1);
            csv->sticky = SL_EINPUT;
            return SL_EINPUT;
        }
    }
    return SL_OK;
}

/* Lines before the header that start with '#' (an instrument's notes) are
 * passed over, as are blank lines; only those wholly in the first buffer. */
static void skip_preamble(sl_csv *csv)
{
    for (;;) {
        const char *p = csv->buf + csv->pos, *end = csv->buf + csv->end;
        if (p < end && (*p == '\n' || (*p == '\r' && p + 1 < end && p[1] == '\n'))) {
            csv->pos += *p == '\n' ? 1 : 2;
            csv->next_line++;
            continue;
        }
        if (p == end || *p != '#')
            return;
        const char *nl = memchr(p, '\n', (size_t)(end - p));
        if (!nl)
            return;
        csv->pos += (size_t)(nl + 1 - p);
        csv->next_line++;
    }
}

/* The separator of the header line: the one of comma, semicolon and tab
 * found most often outside quotes; a comma on a tie or when none is. */
static char detect_separator(const sl_csv *csv)
{
    size_t comma = 0, semicolon = 0, tab = 0;
    bool quoted = false;
    for (const char *p = csv->buf + csv->pos, *end = csv->buf + csv->end; p < end; p++) {
        if (*p == '"')
            quoted = !quoted;
        else if (!quoted && *p == '\n')
            break;
        else if (!quoted) {
            comma += *p == ',';
            semicolon += *p == ';';
            tab += *p == '\t';
        }
    }
    if (semicolon > comma && semicolon >= tab)
        return ';';
    if (tab > comma && tab > semicolon)
        return '\t';
    return ',';
}

static void set_separator(sl_csv *csv, char sep)
{
    csv->sep = sep;
    csv->stop = sep == ';' ? stop_semicolon : sep == '\t' ? stop_tab : stop_comma;
    csv->decimal_comma = sep != ',';
}

static sl_status read_header(sl_csv *csv, sl_diag *diag)
{
    sl_status st = refill(csv, diag);
    if (st != SL_OK)
        return st;
    skip_bom(csv);
    skip_preamble(csv);
    set_separator(csv, detect_separator(csv));
    bool has = false;
    st = read_record(&has, csv, diag);
    if (st != SL_OK)
        return st;
    if (!has)
        return fail(csv, SL_EINPUT, diag, 0, 0, "empty file: no header row");
    csv->columns = calloc(csv->n_fields, sizeof *csv->columns);
    if (!csv->columns)
        return fail(csv, SL_ENOMEM, diag, 0, 0, "out of memory");
    csv->n_columns = csv->n_fields;
    for (size_t i = 0; i < csv->n_columns; i++) {
        const field_span *f = &csv->fields[i];
        csv->columns[i] = copy_string(csv->buf + f->off, f->len);
        if (!csv->columns[i])
            return fail(csv, SL_ENOMEM, diag, 0, 0, "out of memory");
        st = check_header_name(csv, i, diag);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

static sl_csv *reader_new(FILE *stream, bool owns, const char *name)
{
    sl_csv *csv = calloc(1, sizeof *csv);
    if (!csv)
        return NULL;
    csv->stream = stream;
    csv->owns_stream = owns;
    csv->name = copy_string(name, strlen(name));
    csv->buf = calloc(1, BUFFER_BYTES);   /* word loads may read past the data */
    csv->fields = malloc(SL_CSV_MAX_FIELDS * sizeof *csv->fields);
    csv->next_line = 1;
    set_separator(csv, ',');
    if (!csv->name || !csv->buf || !csv->fields) {
        csv->owns_stream = false;
        sl_csv_free(csv);
        return NULL;
    }
    return csv;
}

static sl_status open_stream(sl_csv **out, FILE *stream, const char *name, sl_csv_tap tap,
                             void *tap_ctx, sl_diag *diag)
{
    *out = NULL;
    sl_csv *csv = reader_new(stream, false, name ? name : "<stream>");
    if (!csv) {
        sl_diag_error(diag, "out of memory");
        return SL_ENOMEM;
    }
    csv->tap = tap;
    csv->tap_ctx = tap_ctx;
    sl_status st = read_header(csv, diag);
    if (st != SL_OK) {
        sl_csv_free(csv);
        return st;
    }
    *out = csv;
    return SL_OK;
}

sl_status sl_csv_open_stream(sl_csv **out, FILE *stream, const char *name, sl_diag *diag)
{
    return open_stream(out, stream, name, NULL, NULL, diag);
}

sl_status sl_csv_open_stream_tapped(sl_csv **out, FILE *stream, const char *name, sl_csv_tap tap,
                                    void *tap_ctx, sl_diag *diag)
{
    return open_stream(out, stream, name, tap, tap_ctx, diag);
}

sl_status sl_csv_open(sl_csv **out, const char *path, sl_diag *diag)
{
    *out = NULL;
    if (strcmp(path, "-") == 0)
        return open_stream(out, stdin, "<stdin>", NULL, NULL, diag);
    FILE *f = fopen(path, "rb");
    if (!f) {
        sl_diag_add(diag, SL_SEV_ERROR, path, 0, 0, "cannot open file for reading");
        return SL_EIO;
    }
    sl_status st = open_stream(out, f, path, NULL, NULL, diag);
    if (st != SL_OK) {
        fclose(f);
        return st;
    }
    (*out)->owns_stream = true;
    return SL_OK;
}

void sl_csv_free(sl_csv *csv)
{
    if (!csv)
        return;
    if (csv->owns_stream)
        fclose(csv->stream);
    for (size_t i = 0; i < csv->n_columns; i++)
        free(csv->columns[i]);
    free(csv->columns);
    free(csv->fields);
    free(csv->buf);
    free(csv->name);
    free(csv);
}

const char *sl_csv_name(const sl_csv *csv) { return csv->name; }
char sl_csv_separator(const sl_csv *csv) { return csv->sep; }
size_t sl_csv_column_count(const sl_csv *csv) { return csv->n_columns; }
long sl_csv_line(const sl_csv *csv) { return csv->record_line; }
size_t sl_csv_field_count(const sl_csv *csv) { return csv->n_fields; }

const char *sl_csv_column_name(const sl_csv *csv, size_t index)
{
    return index < csv->n_columns ? csv->columns[index] : NULL;
}

long sl_csv_column(const sl_csv *csv, const char *name)
{
    for (size_t i = 0; i < csv->n_columns; i++)
        if (strcmp(csv->columns[i], name) == 0)
            return (long)i;
    return -1;
}

uint64_t sl_csv_field_word(const sl_csv *csv, size_t field, size_t *len)
{
    if (field >= csv->n_fields) {
        *len = 0;
        return 0;
    }
    const field_span *f = &csv->fields[field];
    *len = f->len;
    /* a field lies in the buffer, so a word from its start is readable */
    uint64_t word = load_word((const unsigned char *)csv->buf + f->off);
    return f->len < WORD_BYTES ? word & ((UINT64_C(1) << (8u * f->len)) - 1u) : word;
}

const char *sl_csv_field(const sl_csv *csv, size_t field, size_t *len)
{
    if (field >= csv->n_fields) {
        if (len)
            *len = 0;
        return "";
    }
    const field_span *f = &csv->fields[field];
    if (len)
        *len = f->len;
    return csv->buf + f->off;
}

static bool is_blank(char c) { return c == ' ' || c == '\t'; }

/* Trim spaces and tabs; returns the new start and sets *len. */
static const char *trim(const char *s, size_t *len)
{
    size_t n = *len;
    while (n > 0 && is_blank(*s)) {
        s++;
        n--;
    }
    while (n > 0 && is_blank(s[n - 1]))
        n--;
    *len = n;
    return s;
}

bool sl_csv_is_empty(const sl_csv *csv, size_t field)
{
    size_t len;
    const char *s = sl_csv_field(csv, field, &len);
    trim(s, &len);
    return len == 0;
}

/* ---- numbers ---- */

typedef enum { NUM_OK, NUM_EMPTY, NUM_JUNK, NUM_RANGE } num_status;

typedef struct {
    bool negative;
    bool truncated;        /* more than 19 significant digits */
    uint64_t mantissa;     /* first 19 significant digits */
    long exp10;            /* value ~ mantissa * 10^exp10 */
} decimal;

static unsigned digit_value(char c) { return (unsigned)((unsigned char)c - '0'); }

/* Digits into the mantissa; leading zeros count no significant digit. Past
 * 19 significant digits the rest is dropped (strtod then decides). Returns
 * the number of digits read; *scale gets how the exponent moves. */
static int take_digits(decimal *d, const char **sp, const char *end, int *sig, bool fraction)
{
    const char *s = *sp;
    long scale = 0;
    for (; s < end && digit_value(*s) < 10; s++) {
        if (*sig < 19) {
            d->mantissa = d->mantissa * 10u + digit_value(*s);
            *sig += d->mantissa != 0;
            scale -= fraction;
        } else {
            d->truncated = true;
            scale += !fraction;
        }
    }
    d->exp10 += scale;
    int n = (int)(s - *sp);
    *sp = s;
    return n;
}

static bool take_exponent(decimal *d, const char *s, const char *end)
{
    bool neg = false;
    if (s < end && (*s == '+' || *s == '-'))
        neg = *s++ == '-';
    if (s == end)
        return false;
    long e = 0;
    for (; s < end && digit_value(*s) < 10; s++)
        e = e < 100000 ? e * 10 + (long)digit_value(*s) : e;
    d->exp10 += neg ? -e : e;
    return s == end;
}

/* Grammar: [+-] (digits [. digits*] | . digits) [(e|E) [+-] digits]. */
static bool scan_decimal(decimal *d, const char *s, const char *end)
{
    memset(d, 0, sizeof *d);
    if (*s == '+' || *s == '-')
        d->negative = *s++ == '-';
    int sig = 0, digits = take_digits(d, &s, end, &sig, false);
    if (s < end && *s == '.') {
        s++;
        digits += take_digits(d, &s, end, &sig, true);
    }
    if (digits == 0)
        return false;
    if (s == end)
        return true;
    return (*s == 'e' || *s == 'E') && take_exponent(d, s + 1, end);
}

/* Exact powers of ten representable in a double. */
static const double exact_pow10[] = {
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11,
    1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
};

/* Clinger's fast path: with the mantissa below 2^53 and |exp10| <= 22 both
 * operands are exact doubles, so one IEEE operation rounds correctly. It is
 * here because strtod was the bottleneck: with strtod alone bench_fit read
 * about 3.5 million sweep rows/s, below the 5 million aimed at; with the
 * fast path about twice that on the same loaded machine. */
static bool fast_value(double *out, const decimal *d)
{
#if FLT_EVAL_METHOD == 0
    if (d->truncated || d->mantissa > (UINT64_C(1) << 53) || d->exp10 < -22 ||
        d->exp10 > 22)
        return false;
    double m = (double)d->mantissa;
    double v = d->exp10 < 0 ? m / exact_pow10[-d->exp10] : m * exact_pow10[d->exp10];
    *out = d->negative ? -v : v;
    return true;
#else
    (void)out;
    (void)d;
    return false;
#endif
}

/* strtod of a grammar-checked token scaled by 10^exp10, rounded once: the
 * exponent is rewritten (mantissa text, then the file's exponent plus
 * exp10), so the scale never adds a second rounding. */
static double strtod_scaled(const char *s, size_t len, int exp10)
{
    if (exp10 == 0)
        return strtod(s, NULL); /* stops at the blank or NUL after the token */
    size_t mant = 0;
    while (mant < len && s[mant] != 'e' && s[mant] != 'E')
        mant++;
    long e = mant < len ? strtol(s + mant + 1, NULL, 10) : 0;
    e = e > 100000 ? 100000 : e < -100000 ? -100000 : e;
    char *text = malloc(mant + 32);
    if (!text)
        return NAN;
    snprintf(text, mant + 32, "%.*se%ld", (int)mant, s, e + exp10);
    double v = strtod(text, NULL);
    free(text);
    return v;
}

/* Parse a number given in a unit 10^exp10 of its SI unit; with
 * decimal_comma one comma (and no point) stands for the decimal point. */
static num_status parse_number_e(double *out, const char *s, size_t len, int exp10,
                                 bool decimal_comma)
{
    s = trim(s, &len);
    if (len == 0)
        return NUM_EMPTY;
    char local[64], *copy = NULL;
    if (decimal_comma && memchr(s, ',', len)) {
        if (memchr(s, '.', len))
            return NUM_JUNK; /* "1.234,5": no thousands separators */
        copy = len < sizeof local ? local : malloc(len + 1);
        if (!copy)
            return NUM_JUNK;
        for (size_t i = 0; i < len; i++)
            copy[i] = s[i] == ',' ? '.' : s[i];
        copy[len] = '\0';
        s = copy;
    }
    decimal d;
    num_status st = NUM_OK;
    if (!scan_decimal(&d, s, s + len)) {
        st = NUM_JUNK;
    } else {
        d.exp10 += exp10;
        if (!fast_value(out, &d)) {
            /* the grammar was checked, so strtod reads exactly this token */
            double v = strtod_scaled(s, len, exp10);
            if (isnan(v) || v == HUGE_VAL || v == -HUGE_VAL || (v == 0.0 && d.mantissa != 0))
                st = NUM_RANGE;
            else
                *out = v;
        }
    }
    if (copy && copy != local)
        free(copy);
    return st;
}

static num_status parse_number(double *out, const char *s, size_t len)
{
    return parse_number_e(out, s, len, 0, false);
}

/* ---- numbers: the short-token path ---- */

#if FLT_EVAL_METHOD == 0

/* Value of eight digit values (0 to 9), one per byte, the first byte the
 * most significant: adjacent digits are paired (10 a + b fits a byte), then
 * the four pairs are weighted 10^6, 10^4, 10^2 and 1 by two multiplications
 * that leave their sums in the upper 32 bits. */
static uint64_t eight_digits_value(uint64_t d)
{
    d = d * 10u + (d >> 8);
    const uint64_t pairs = UINT64_C(0x000000FF000000FF);
    return ((d & pairs) * (100u + (UINT64_C(1000000) << 32)) +
            ((d >> 16) & pairs) * (1u + (UINT64_C(10000) << 32))) >> 32;
}

/* The high bit of each byte set where that byte is not a digit value (0 to
 * 9). A byte from 0x8A up may carry into the next one and flag that too:
 * extra flags, never a non-digit missed. */
static uint64_t non_digit_values(uint64_t v)
{
    return ((v + BYTES_01 * (0x80u - 10u)) | v) & BYTES_80;
}

/* Exact powers of ten, negated in the second row: dividing by one carries
 * the sign too, and IEEE division rounds the same either side of zero. */
static const double signed_pow10[2][WORD_BYTES] = {
    { 1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7 },
    { -1e0, -1e1, -1e2, -1e3, -1e4, -1e5, -1e6, -1e7 },
};

/* Take the decimal point out of a word of digit values: the bytes below it
 * move up one, so the digits join. *n_frac gets the number of digits after
 * it. Returns the bytes taken out (0 or 1), or -1 when a byte other than one
 * point is not a digit. */
static int take_out_point(uint64_t *v, unsigned *n_frac)
{
    uint64_t odd = non_digit_values(*v);
    *n_frac = 0;
    if (!odd)
        return 0;
    unsigned at = first_flagged_byte(odd);
    if ((odd & (odd - 1u)) || ((*v >> (8u * at)) & 0xFFu) != ('.' ^ '0'))
        return -1;
    uint64_t below = (UINT64_C(1) << (8u * at)) - 1u;
    *v = (*v & ~(below | UINT64_C(0xFF) << (8u * at))) | (*v & below) << 8;
    *n_frac = WORD_BYTES - 1u - at;
    return 1;
}

/* A token of 1 to 8 bytes of the form [+-] digits [. digits] (no blanks, no
 * exponent), read as one word without branching on its digits: the token
 * is moved to the top of the word (the bytes below become leading zeros)
 * and turned into digit values, its sign byte cleared and its point taken
 * out. Eight digits at most stay below 2^53, so the division by an exact
 * power of ten is fast_value's, correctly rounded. s[0] to s[7] must be
 * readable. Returns false, leaving *out alone, for any other token:
 * parse_number decides those. */
static bool short_number(double *out, const char *s, size_t len)
{
    unsigned shift = 64u - 8u * (unsigned)len, n_frac;
    uint64_t v = (load_word((const unsigned char *)s) ^ (BYTES_01 * '0')) << shift;
    bool negative = s[0] == '-', has_sign = negative || s[0] == '+';
    v &= ~((uint64_t)(has_sign ? 0xFFu : 0u) << shift);
    int points = take_out_point(&v, &n_frac);
    if (points < 0 || len == (size_t)has_sign + (size_t)points)
        return false;   /* not a number, or no digit */
    *out = (double)(int64_t)eight_digits_value(v) / signed_pow10[negative][n_frac];
    return true;
}

/* short_number for a value in a unit 10^exp10 of its SI unit: the scale
 * joins the division (or becomes a multiplication) by one exact power of
 * ten, so the SI value is still rounded once. */
static bool short_number_e(double *out, const char *s, size_t len, int exp10)
{
    unsigned shift = 64u - 8u * (unsigned)len, n_frac;
    uint64_t v = (load_word((const unsigned char *)s) ^ (BYTES_01 * '0')) << shift;
    bool negative = s[0] == '-', has_sign = negative || s[0] == '+';
    v &= ~((uint64_t)(has_sign ? 0xFFu : 0u) << shift);
    int points = take_out_point(&v, &n_frac);
    if (points < 0 || len == (size_t)has_sign + (size_t)points)
        return false;
    long e = (long)exp10 - (long)n_frac;
    if (e < -22 || e > 22)
        return false;
    double m = (double)(int64_t)eight_digits_value(v);
    double x = e < 0 ? m / exact_pow10[-e] : m * exact_pow10[e];
    *out = negative ? -x : x;
    return true;
}
#else
/* Where double operations are evaluated wider, one division is not one
 * rounding: parse_number decides every token. */
static bool short_number(double *out, const char *s, size_t len)
{
    (void)out;
    (void)s;
    (void)len;
    return false;
}

static bool short_number_e(double *out, const char *s, size_t len, int exp10)
{
    (void)out;
    (void)s;
    (void)len;
    (void)exp10;
    return false;
}
#endif

/* A token of up to 24 bytes, [+-] digits [point digits] [(e|E) [+-] d{1,3}]
 * with at most 15 significant digits (so the integer of its digits is
 * exact) and a power of ten within 10^22 once the exponent, the point and
 * exp10 are joined: one exact multiplication or division, rounded once.
 * comma_point lets ',' stand for the point. Returns false for any other
 * token, which parse_number_e then decides (blanks, long mantissas). */
static bool plain_number(double *out, const char *s, size_t len, int exp10, bool comma_point)
{
#if FLT_EVAL_METHOD != 0
    return false; /* one division is not one rounding where doubles are evaluated wider */
#endif
    if (len == 0 || len > 24)
        return false;
    size_t i = 0;
    bool negative = s[0] == '-';
    i += negative || s[0] == '+';
    uint64_t m = 0;
    int sig = 0, frac = 0, digits = 0;
    bool point = false;
    for (; i < len; i++) {
        unsigned d = digit_value(s[i]);
        if (d < 10) {
            digits++;
            frac += point;
            if (m == 0 && d == 0)
                continue; /* a leading zero is no significant digit */
            if (++sig > 15)
                return false;
            m = 10u * m + d;
        } else if (!point && (s[i] == '.' || (comma_point && s[i] == ','))) {
            point = true;
        } else {
            break;
        }
    }
    if (digits == 0)
        return false;
    long e = (long)exp10 - frac;
    if (i < len) {
        if (s[i] != 'e' && s[i] != 'E')
            return false;
        i++;
        bool neg_exp = i < len && s[i] == '-';
        i += i < len && (s[i] == '-' || s[i] == '+');
        size_t start = i;
        long x = 0;
        for (; i < len && i - start < 3 && digit_value(s[i]) < 10; i++)
            x = 10 * x + (long)digit_value(s[i]);
        if (i == start || i != len)
            return false;
        e += neg_exp ? -x : x;
    }
    if (e < -22 || e > 22)
        return false;
    double v = (double)m;
    v = e < 0 ? v / exact_pow10[-e] : v * exact_pow10[e];
    *out = negative ? -v : v;
    return true;
}

/* A token of the form M e X, M a short_number token of at most 8 bytes and X
 * an exponent of at most three digits ("1.234567e-05", the way meters write
 * currents): the exponent joins the scale of short_number_e, so the value is
 * still rounded once. Returns false for any other token. */
static bool short_exp_number(double *out, const char *s, size_t len, int exp10)
{
    /* the first 'e' or 'E' from byte 1 on, at byte 8 at the latest: bytes 1
     * to 7 looked at in one word ('E' | 0x20 is 'e', no other byte's is) */
    uint64_t in_token = len >= WORD_BYTES ? ~UINT64_C(0) : (UINT64_C(1) << (8u * len)) - 1u;
    uint64_t lowered = load_word((const unsigned char *)s) | BYTES_01 * 0x20u;
    uint64_t e_bytes = bytes_below(lowered ^ BYTES_01 * 'e', 1u) & in_token & ~UINT64_C(0xFF);
    size_t k;
    if (e_bytes)
        k = first_flagged_byte(e_bytes);
    else if (len > WORD_BYTES && (s[WORD_BYTES] | 0x20) == 'e')
        k = WORD_BYTES;
    else
        return false;
    if (k + 1 >= len)
        return false;
    const char *e = s + k + 1;
    size_t n = len - k - 1;
    bool negative = *e == '-';
    if (*e == '+' || *e == '-') {
        e++;
        n--;
    }
    if (n == 0 || n > 3)
        return false;
    int x = 0;
    for (size_t i = 0; i < n; i++) {
        unsigned d = digit_value(e[i]);
        if (d > 9)
            return false;
        x = 10 * x + (int)d;
    }
    return short_number_e(out, s, k, exp10 + (negative ? -x : x));
}

bool sl_csv_parse_double(double *out, const char *token, size_t len)
{
    char word[WORD_BYTES] = { 0 };   /* short_number reads a whole word */
    if (len - 1u < WORD_BYTES) {
        memcpy(word, token, len);
        if (short_number(out, word, len))
            return true;
    }
    return parse_number(out, token, len) == NUM_OK;
}

bool sl_csv_parse_double_e(double *out, const char *token, size_t len, int exp10,
                           bool decimal_comma)
{
    char word[2 * WORD_BYTES] = { 0 };
    if (len - 1u < WORD_BYTES) {
        memcpy(word, token, len);
        if (short_number_e(out, word, len, exp10))
            return true;
    }
    if (len - 1u < 2 * WORD_BYTES - 1u) {
        memcpy(word, token, len);
        if (short_exp_number(out, word, len, exp10))
            return true;
    }
    if (plain_number(out, token, len, exp10, decimal_comma))
        return true;
    return parse_number_e(out, token, len, exp10, decimal_comma) == NUM_OK;
}

/* sl_csv_number for the tokens short_number leaves, and its errors; out of
 * line, so that the short path needs no stack frame. */
OUT_OF_LINE static sl_status general_number(double *out, const sl_csv *csv, size_t field,
                                            int exp10, sl_diag *diag)
{
    size_t len;
    const char *s = sl_csv_field(csv, field, &len);
    num_status st = parse_number_e(out, s, len, exp10, csv->decimal_comma);
    if (st == NUM_OK)
        return SL_OK;
    const char *col = field < csv->n_columns ? csv->columns[field] : "?";
    char tok[SL_CSV_QUOTE_MAX + 4];
    quote_token(tok, s, len);
    long line = csv->record_line, at = (long)field + 1;
    if (st == NUM_EMPTY)
        sl_diag_add(diag, SL_SEV_ERROR, csv->name, line, at,
                    "empty value in column %s, a number is required", col);
    else if (st == NUM_RANGE)
        sl_diag_add(diag, SL_SEV_ERROR, csv->name, line, at,
                    "number \"%s\" in column %s is out of range", tok, col);
    else
        sl_diag_add(diag, SL_SEV_ERROR, csv->name, line, at,
                    "bad number \"%s\" in column %s", tok, col);
    return SL_EINPUT;
}

sl_status sl_csv_number(double *out, const sl_csv *csv, size_t field, sl_diag *diag)
{
    if (field < csv->n_fields) {
        const field_span *f = &csv->fields[field];
        /* a field lies in the buffer, so a word from its start is readable */
        if (f->len - 1u < WORD_BYTES && short_number(out, csv->buf + f->off, f->len))
            return SL_OK;
        if (short_exp_number(out, csv->buf + f->off, f->len, 0) ||
            plain_number(out, csv->buf + f->off, f->len, 0, csv->decimal_comma))
            return SL_OK;
    }
    return general_number(out, csv, field, 0, diag);
}

sl_status sl_csv_number_e(double *out, const sl_csv *csv, size_t field, int exp10,
                          sl_diag *diag)
{
    if (exp10 == 0)
        return sl_csv_number(out, csv, field, diag);
    if (field < csv->n_fields) {
        const field_span *f = &csv->fields[field];
        if (f->len - 1u < WORD_BYTES && short_number_e(out, csv->buf + f->off, f->len, exp10))
            return SL_OK;
        if (short_exp_number(out, csv->buf + f->off, f->len, exp10) ||
            plain_number(out, csv->buf + f->off, f->len, exp10, csv->decimal_comma))
            return SL_OK;
    }
    return general_number(out, csv, field, exp10, diag);
}

/* ---- text ---- */

/* Length of the UTF-8 sequence starting at s (bytes available: n), or 0 when
 * it is not a valid, shortest-form encoding of a scalar value. */
static size_t utf8_sequence(const unsigned char *s, size_t n)
{
    unsigned char c = s[0];
    if (c < 0x80)
        return 1;
    size_t need = c >= 0xF0 ? 4 : c >= 0xE0 ? 3 : c >= 0xC2 ? 2 : 0;
    if (need == 0 || c > 0xF4 || need > n)
        return 0;
    for (size_t i = 1; i < need; i++)
        if ((s[i] & 0xC0) != 0x80)
            return 0;
    if (c == 0xE0 && s[1] < 0xA0)
        return 0;   /* overlong */
    if (c == 0xED && s[1] >= 0xA0)
        return 0;   /* surrogate */
    if (c == 0xF0 && s[1] < 0x90)
        return 0;   /* overlong */
    if (c == 0xF4 && s[1] >= 0x90)
        return 0;   /* past U+10FFFF */
    return need;
}

bool sl_csv_utf8_valid(const char *bytes, size_t len)
{
    const unsigned char *s = (const unsigned char *)bytes;
    for (size_t i = 0; i < len;) {
        size_t k = utf8_sequence(s + i, len - i);
        if (k == 0)
            return false;
        i += k;
    }
    return true;
}

static bool has_control(const char *s, size_t len)
{
    for (size_t i = 0; i < len; i++) {
        unsigned char c = (unsigned char)s[i];
        if ((c < 0x20 && c != '\t') || c == 0x7f)
            return true;
    }
    return false;
}

sl_status sl_csv_text(const char **out, size_t *len, const sl_csv *csv, size_t field,
                      size_t max_bytes, sl_diag *diag)
{
    size_t n;
    const char *s = sl_csv_field(csv, field, &n);
    const char *col = field < csv->n_columns ? csv->columns[field] : "?";
    const char *why = NULL;
    if (n > max_bytes)
        why = "is too long";
    else if (!sl_csv_utf8_valid(s, n))
        why = "is not valid UTF-8";
    else if (has_control(s, n))
        why = "holds a control character";
    if (why) {
        char tok[SL_CSV_QUOTE_MAX + 4];
        quote_token(tok, s, n);
        sl_diag_add(diag, SL_SEV_ERROR, csv->name, csv->record_line, (long)field + 1,
                    "value \"%s\" in column %s %s", tok, col, why);
        return SL_EINPUT;
    }
    *out = s;
    if (len)
        *len = n;
    return SL_OK;
}
