/* SPDX-License-Identifier: MIT
 * Row source (see include/splitlot/rowsrc.h): header names to quantities with
 * their units, --columns mappings, and each row's values in SI over the
 * streaming CSV reader. Not for: what a row means to a lot (ingest.c).
 */
#include "splitlot/rowsrc.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/text.h"
#include "splitlot/units.h"

#define NO_DIM (-1)
#define NAME_MAX_BYTES 64

typedef struct {
    const char *canonical;
    int dim;            /* sl_dimension, or NO_DIM: canonical name only */
    const char *bases;  /* '|'-separated names it goes by before a unit */
} quantity_spec;

static const quantity_spec specs[SL_ROW_COUNT] = {
    [SL_ROW_WAFER] = { "wafer", NO_DIM, "" },
    [SL_ROW_DEVICE] = { "device", NO_DIM, "" },
    [SL_ROW_DIE_X] = { "die_x", NO_DIM, "" },
    [SL_ROW_DIE_Y] = { "die_y", NO_DIM, "" },
    [SL_ROW_VG] = { "vg_V", SL_DIM_VOLT, "vg|vgs|v_g|v_gs|gate_voltage" },
    [SL_ROW_R] = { "r_ohm", SL_DIM_OHM, "r|rds|r_ds|resistance" },
    [SL_ROW_ID] = { "id_A", SL_DIM_AMPERE, "id|ids|i_d|i_ds|drain_current" },
    [SL_ROW_VD] = { "vd_V", SL_DIM_VOLT, "vd|vds|v_d|v_ds|drain_voltage" },
    [SL_ROW_VCNP] = { "v_cnp_V", SL_DIM_VOLT, "v_cnp|vcnp" },
    [SL_ROW_MOBILITY] = { "mobility_cm2_per_Vs", NO_DIM, "" },
    [SL_ROW_N0] = { "n0_per_cm2", NO_DIM, "" },
    [SL_ROW_R_CONTACT] = { "r_contact_ohm", SL_DIM_OHM, "r_contact|rc" },
    [SL_ROW_HYSTERESIS] = { "hysteresis_V", SL_DIM_VOLT, "hysteresis" },
    [SL_ROW_TEMPERATURE] = { "temperature_K", SL_DIM_KELVIN, "temperature|temp|t" },
    [SL_ROW_DIRECTION] = { "direction", NO_DIM, "" },
    [SL_ROW_COMPLIANCE] = { "compliance", NO_DIM, "" },
    [SL_ROW_DEVICE_TYPE] = { "device_type", NO_DIM, "" },
    [SL_ROW_LENGTH] = { "channel_length_um", NO_DIM, "" },
    [SL_ROW_WIDTH] = { "channel_width_um", NO_DIM, "" },
};

struct sl_rowsrc {
    sl_csv *csv;
    long col[SL_ROW_COUNT];
    int exp10[SL_ROW_COUNT];
    double overflow_si[SL_ROW_COUNT];
    bool mapped[SL_ROW_COUNT];  /* set by --columns: header matching leaves it */
    long *quantity_of;          /* per file column: quantity, or -1 */
    size_t n_columns;
    size_t *unused;             /* file columns nobody reads */
    size_t n_unused;
    /* sl_rowsrc_number_repeated: the last text read (its first 8 bytes as
     * sl_csv_field_word gives them, and all of it) and its value */
    uint64_t last_word[SL_ROW_COUNT];
    char last_text[SL_ROW_COUNT][16];
    size_t last_len[SL_ROW_COUNT];  /* 0: none */
    double last_value[SL_ROW_COUNT];
};

/* ---- names ---- */

static int lower(int c) { return c >= 'A' && c <= 'Z' ? c - 'A' + 'a' : c; }

/* Equal without regard to case, a space standing for an underscore. */
static bool same_name(const char *a, size_t alen, const char *b, size_t blen)
{
    if (alen != blen)
        return false;
    for (size_t i = 0; i < alen; i++) {
        int x = lower((unsigned char)a[i]), y = lower((unsigned char)b[i]);
        if (x == ' ')
            x = '_';
        if (y == ' ')
            y = '_';
        if (x != y)
            return false;
    }
    return true;
}

static bool is_base(const quantity_spec *q, const char *name, size_t len)
{
    for (const char *b = q->bases; *b;) {
        const char *bar = strchr(b, '|');
        size_t n = bar ? (size_t)(bar - b) : strlen(b);
        if (same_name(b, n, name, len))
            return true;
        b += n + (bar != NULL);
    }
    return false;
}

static const char *trim(const char *s, size_t *len)
{
    while (*len > 0 && (*s == ' ' || *s == '\t')) {
        s++;
        (*len)--;
    }
    while (*len > 0 && (s[*len - 1] == ' ' || s[*len - 1] == '\t'))
        (*len)--;
    return s;
}

typedef enum { NAME_NONE, NAME_MATCH, NAME_BAD_UNIT } name_match;

typedef struct {
    sl_row_quantity q;
    int exp10;
    const char *unit; /* NAME_BAD_UNIT: the unit written */
    size_t unit_len;
} name_result;

/* base and unit of "base [unit]" / "base (unit)"; false for another shape. */
static bool split_bracket(const char *s, size_t len, size_t *base_len, const char **unit,
                          size_t *unit_len)
{
    if (len < 3 || (s[len - 1] != ']' && s[len - 1] != ')'))
        return false;
    char open = s[len - 1] == ']' ? '[' : '(';
    size_t at = len - 1;
    while (at > 0 && s[at - 1] != open)
        at--;
    if (at == 0)
        return false;
    *unit_len = len - 1 - at;
    *unit = trim(s + at, unit_len);
    *base_len = at - 1;
    trim(s, base_len);
    return *base_len > 0 && *unit_len > 0;
}

static name_match match_with_unit(name_result *r, const char *base, size_t base_len,
                                  const char *unit, size_t unit_len)
{
    for (int q = 0; q < SL_ROW_COUNT; q++) {
        if (specs[q].dim == NO_DIM || !is_base(&specs[q], base, base_len))
            continue;
        r->q = (sl_row_quantity)q;
        r->unit = unit;
        r->unit_len = unit_len;
        return sl_units_exp10(&r->exp10, (sl_dimension)specs[q].dim, unit, unit_len)
                   ? NAME_MATCH
                   : NAME_BAD_UNIT;
    }
    return NAME_NONE;
}

/* The quantity a column name stands for. */
static name_match match_name(name_result *r, const char *name, size_t len)
{
    name = trim(name, &len);
    r->exp10 = 0;
    for (int q = 0; q < SL_ROW_COUNT; q++)
        if (same_name(specs[q].canonical, strlen(specs[q].canonical), name, len)) {
            r->q = (sl_row_quantity)q;
            return NAME_MATCH;
        }
    size_t base_len, unit_len;
    const char *unit;
    if (split_bracket(name, len, &base_len, &unit, &unit_len))
        return match_with_unit(r, name, base_len, unit, unit_len);
    const char *bar = NULL;
    for (size_t i = 0; i < len; i++)
        if (name[i] == '_')
            bar = name + i;
    if (bar && bar > name && match_with_unit(r, name, (size_t)(bar - name), bar + 1,
                                             len - (size_t)(bar - name) - 1) == NAME_MATCH)
        return NAME_MATCH;
    return NAME_NONE;
}

const char *sl_rowsrc_quantity_name(sl_row_quantity q)
{
    return (unsigned)q < SL_ROW_COUNT ? specs[q].canonical : "?";
}

/* ---- mapping ---- */

static void assign(sl_rowsrc *src, sl_row_quantity q, long column, int exp10)
{
    src->col[q] = column;
    src->exp10[q] = exp10;
    src->quantity_of[column] = q;
    char token[] = "9.9e37";
    if (!sl_csv_parse_double_e(&src->overflow_si[q], token, strlen(token), exp10, false))
        src->overflow_si[q] = HUGE_VAL;
}

static sl_status bad_unit(const sl_rowsrc *src, long column, const name_result *r, sl_diag *diag)
{
    sl_diag_add(diag, SL_SEV_ERROR, sl_csv_name(src->csv), sl_csv_line(src->csv), column + 1,
                "column \"%s\": unknown unit '%.*s' for %s (%s is given in %s or a prefix of it: "
                "V mV uV kV, A mA uA nA pA, ohm kohm Mohm Gohm, K)",
                sl_csv_column_name(src->csv, (size_t)column), (int)r->unit_len, r->unit,
                specs[r->q].canonical, specs[r->q].canonical,
                sl_units_si_name((sl_dimension)specs[r->q].dim));
    return SL_EINPUT;
}

static sl_status map_header(sl_rowsrc *src, sl_diag *diag)
{
    sl_status st = SL_OK;
    for (size_t i = 0; i < src->n_columns; i++) {
        if (src->quantity_of[i] >= 0)
            continue; /* mapped by --columns */
        const char *name = sl_csv_column_name(src->csv, i);
        name_result r;
        name_match m = match_name(&r, name, strlen(name));
        if (m == NAME_BAD_UNIT) {
            st = bad_unit(src, (long)i, &r, diag);
            continue;
        }
        if (m != NAME_MATCH || src->mapped[r.q])
            continue;
        if (src->col[r.q] >= 0) {
            sl_diag_add(diag, SL_SEV_ERROR, sl_csv_name(src->csv), sl_csv_line(src->csv),
                        (long)i + 1,
                        "columns \"%s\" (column %ld) and \"%s\" (column %zu) both give %s; "
                        "leave one out or map one with --columns",
                        sl_csv_column_name(src->csv, (size_t)src->col[r.q]), src->col[r.q] + 1,
                        name, i + 1, specs[r.q].canonical);
            st = SL_EINPUT;
            continue;
        }
        assign(src, r.q, (long)i, r.exp10);
    }
    return st;
}

/* A header column by name, exactly, else without regard to case. */
static long find_column(const sl_rowsrc *src, const char *name, size_t len)
{
    for (int any_case = 0; any_case < 2; any_case++)
        for (size_t i = 0; i < src->n_columns; i++) {
            const char *c = sl_csv_column_name(src->csv, i);
            if (any_case ? same_name(c, strlen(c), name, len)
                         : strlen(c) == len && memcmp(c, name, len) == 0)
                return (long)i;
        }
    return -1;
}

static sl_status mapping_error(sl_diag *diag, const char *what, size_t len, const char *why)
{
    sl_diag_error(diag, "--columns: '%.*s' %s", (int)len, what, why);
    return SL_EINPUT;
}

static sl_status apply_mapping(sl_rowsrc *src, const char *item, size_t len, sl_diag *diag)
{
    const char *eq = memchr(item, '=', len);
    if (!eq || eq == item || eq + 1 == item + len)
        return mapping_error(diag, item, len, "is not QUANTITY=COLUMN");
    name_result r;
    size_t qlen = (size_t)(eq - item), clen = len - qlen - 1;
    name_match m = match_name(&r, item, qlen);
    if (m != NAME_MATCH) {
        char q[NAME_MAX_BYTES + 1];
        snprintf(q, sizeof q, "%.*s", (int)(qlen < NAME_MAX_BYTES ? qlen : NAME_MAX_BYTES), item);
        const char *names[SL_ROW_COUNT];
        for (int k = 0; k < SL_ROW_COUNT; k++)
            names[k] = specs[k].canonical;
        char why[160], hint[96];
        snprintf(why, sizeof why, "%s%s",
                 m == NAME_BAD_UNIT ? "has a unit not in the table" : "names no quantity",
                 sl_text_did_you_mean(hint, sizeof hint, q, names, SL_ROW_COUNT));
        return mapping_error(diag, item, qlen, why);
    }
    long column = find_column(src, eq + 1, clen);
    if (column < 0)
        return mapping_error(diag, eq + 1, clen, "is not a column of the file");
    if (src->mapped[r.q] || src->quantity_of[column] >= 0)
        return mapping_error(diag, item, len, "maps a quantity or a column twice");
    src->mapped[r.q] = true;
    assign(src, r.q, column, r.exp10);
    return SL_OK;
}

static sl_status apply_mappings(sl_rowsrc *src, const char *columns, sl_diag *diag)
{
    sl_status st = SL_OK;
    while (columns && *columns) {
        const char *comma = strchr(columns, ',');
        size_t len = comma ? (size_t)(comma - columns) : strlen(columns);
        sl_status one = apply_mapping(src, columns, len, diag);
        if (st == SL_OK)
            st = one;
        columns += len + (comma != NULL);
    }
    return st;
}

/* Map the header of an open reader (taken over, freed on failure). */
static sl_status open_over(sl_rowsrc **out, sl_csv *csv, const char *columns, sl_diag *diag)
{
    sl_rowsrc *src = calloc(1, sizeof *src);
    if (!src) {
        sl_csv_free(csv);
        sl_diag_error(diag, "out of memory");
        return SL_ENOMEM;
    }
    src->csv = csv;
    src->n_columns = sl_csv_column_count(src->csv);
    src->quantity_of = malloc((src->n_columns + 1) * sizeof *src->quantity_of);
    src->unused = malloc((src->n_columns + 1) * sizeof *src->unused);
    if (!src->quantity_of || !src->unused) {
        sl_rowsrc_free(src);
        sl_diag_error(diag, "out of memory");
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < src->n_columns; i++)
        src->quantity_of[i] = -1;
    for (int q = 0; q < SL_ROW_COUNT; q++)
        src->col[q] = -1;
    sl_status st = apply_mappings(src, columns, diag);
    sl_status header = map_header(src, diag);
    if (st == SL_OK)
        st = header;
    if (st != SL_OK) {
        sl_rowsrc_free(src);
        return st;
    }
    *out = src;
    return SL_OK;
}

sl_status sl_rowsrc_open(sl_rowsrc **out, const char *path, const char *columns, sl_diag *diag)
{
    *out = NULL;
    sl_csv *csv = NULL;
    sl_status st = sl_csv_open(&csv, path, diag);
    return st == SL_OK ? open_over(out, csv, columns, diag) : st;
}

sl_status sl_rowsrc_open_stream_tapped(sl_rowsrc **out, FILE *stream, const char *name,
                                       const char *columns, sl_csv_tap tap, void *tap_ctx,
                                       sl_diag *diag)
{
    *out = NULL;
    sl_csv *csv = NULL;
    sl_status st = sl_csv_open_stream_tapped(&csv, stream, name, tap, tap_ctx, diag);
    return st == SL_OK ? open_over(out, csv, columns, diag) : st;
}

sl_status sl_rowsrc_open_stream(sl_rowsrc **out, FILE *stream, const char *name,
                                const char *columns, sl_diag *diag)
{
    return sl_rowsrc_open_stream_tapped(out, stream, name, columns, NULL, NULL, diag);
}

void sl_rowsrc_free(sl_rowsrc *src)
{
    if (!src)
        return;
    sl_csv_free(src->csv);
    free(src->quantity_of);
    free(src->unused);
    free(src);
}

sl_csv *sl_rowsrc_csv(const sl_rowsrc *src) { return src->csv; }
const char *sl_rowsrc_name(const sl_rowsrc *src) { return sl_csv_name(src->csv); }
char sl_rowsrc_separator(const sl_rowsrc *src) { return sl_csv_separator(src->csv); }
long sl_rowsrc_column(const sl_rowsrc *src, sl_row_quantity q) { return src->col[q]; }
bool sl_rowsrc_has(const sl_rowsrc *src, sl_row_quantity q) { return src->col[q] >= 0; }
size_t sl_rowsrc_unused_count(const sl_rowsrc *src) { return src->n_unused; }
long sl_rowsrc_line(const sl_rowsrc *src) { return sl_csv_line(src->csv); }

const char *sl_rowsrc_unused(const sl_rowsrc *src, size_t i)
{
    return i < src->n_unused ? sl_csv_column_name(src->csv, src->unused[i]) : NULL;
}

/* ---- what the caller needs ---- */

/* An unmapped column that is the quantity without its unit, else the one
 * sl_text_suggest finds nearest to the canonical name, or NULL. */
static const char *suggest(const sl_rowsrc *src, sl_row_quantity q)
{
    const char *names[64];
    size_t n = 0;
    for (size_t i = 0; i < src->n_columns && n < 64; i++) {
        if (src->quantity_of[i] >= 0)
            continue;
        const char *column = sl_csv_column_name(src->csv, i);
        char name[NAME_MAX_BYTES + 1];
        snprintf(name, sizeof name, "%s", column);
        for (char *p = name; *p; p++)
            *p = (char)lower((unsigned char)*p);
        if (specs[q].dim != NO_DIM && is_base(&specs[q], name, strlen(name)))
            return column; /* the quantity without its unit */
        names[n++] = column;
    }
    return sl_text_suggest(specs[q].canonical, names, n);
}

static void note_columns(const sl_rowsrc *src, sl_diag *diag)
{
    char list[512] = "";
    size_t used = 0;
    for (size_t i = 0; i < src->n_columns && used < sizeof list - 8; i++) {
        int n = snprintf(list + used, sizeof list - used, "%s\"%s\"", i ? ", " : "",
                         sl_csv_column_name(src->csv, i));
        used += n > 0 ? (size_t)n : 0;
    }
    if (used >= sizeof list - 8)
        snprintf(list + sizeof list - 8, 8, ", ...");
    char sep = sl_csv_separator(src->csv);
    sl_diag_add(diag, SL_SEV_NOTE, sl_csv_name(src->csv), sl_csv_line(src->csv), 0,
                "columns found: %s (separator %s)", list,
                sep == '\t' ? "tab" : sep == ';' ? "';'" : "','");
}

sl_status sl_rowsrc_require(sl_rowsrc *src, sl_row_set need, sl_row_set want, const char *needs,
                            sl_diag *diag)
{
    sl_status st = SL_OK;
    for (int q = 0; q < SL_ROW_COUNT; q++) {
        if (!(need & SL_ROW_BIT(q)) || src->col[q] >= 0)
            continue;
        const char *near = suggest(src, (sl_row_quantity)q);
        char hint[200] = "";
        if (near) /* the did-you-mean of sl_text_did_you_mean, and how to map it */
            snprintf(hint, sizeof hint, " (did you mean '%s'?); map it with --columns %s=%s", near,
                     specs[q].canonical, near);
        sl_diag_add(diag, SL_SEV_ERROR, sl_csv_name(src->csv), sl_csv_line(src->csv), 0,
                    "missing column '%s' (%s)%s", specs[q].canonical, needs, hint);
        st = SL_EINPUT;
    }
    if (st != SL_OK)
        note_columns(src, diag);
    src->n_unused = 0;
    for (size_t i = 0; i < src->n_columns; i++) {
        long q = src->quantity_of[i];
        if (q < 0 || !(want & SL_ROW_BIT(q)))
            src->unused[src->n_unused++] = i;
    }
    return st;
}

/* ---- rows ---- */

sl_status sl_rowsrc_next(bool *has_row, sl_rowsrc *src, sl_diag *diag)
{
    return sl_csv_next(has_row, src->csv, diag);
}

sl_status sl_rowsrc_number(double *out, const sl_rowsrc *src, sl_row_quantity q, sl_diag *diag)
{
    /* the unscaled number, the common case, without sl_csv_number_e's hop */
    if (src->exp10[q] == 0)
        return sl_csv_number(out, src->csv, (size_t)src->col[q], diag);
    return sl_csv_number_e(out, src->csv, (size_t)src->col[q], src->exp10[q], diag);
}

sl_status sl_rowsrc_number_repeated(double *out, sl_rowsrc *src, sl_row_quantity q,
                                    sl_diag *diag)
{
    size_t len;
    uint64_t word = sl_csv_field_word(src->csv, (size_t)src->col[q], &len);
    if (len > 0 && len == src->last_len[q] && word == src->last_word[q]) {
        /* a word holds a short value whole; a longer one is compared on */
        const char *text = len > 8 ? sl_csv_field(src->csv, (size_t)src->col[q], NULL) : NULL;
        if (!text || memcmp(text + 8, src->last_text[q] + 8, len - 8) == 0) {
            *out = src->last_value[q];
            return SL_OK;
        }
    }
    sl_status st = sl_rowsrc_number(out, src, q, diag);
    if (st == SL_OK && len < sizeof src->last_text[q]) {
        memcpy(src->last_text[q], sl_csv_field(src->csv, (size_t)src->col[q], NULL), len);
        src->last_word[q] = word;
        src->last_len[q] = len;
        src->last_value[q] = *out;
    }
    return st;
}

sl_status sl_rowsrc_optional(double *out, const sl_rowsrc *src, sl_row_quantity q,
                             sl_diag *diag)
{
    *out = NAN;
    if (src->col[q] < 0 || sl_csv_is_empty(src->csv, (size_t)src->col[q]))
        return SL_OK;
    return sl_rowsrc_number(out, src, q, diag);
}

bool sl_rowsrc_is_overflow(const sl_rowsrc *src, sl_row_quantity q, double si_value)
{
    return fabs(si_value) >= src->overflow_si[q];
}

double sl_rowsrc_overflow_si(const sl_rowsrc *src, sl_row_quantity q)
{
    return src->overflow_si[q];
}

static bool field_is(const char *s, size_t len, const char *word)
{
    s = trim(s, &len);
    return same_name(s, len, word, strlen(word));
}

sl_status sl_rowsrc_flag(bool *out, const sl_rowsrc *src, sl_row_quantity q, sl_diag *diag)
{
    *out = false;
    if (src->col[q] < 0)
        return SL_OK;
    size_t len;
    const char *s = sl_csv_field(src->csv, (size_t)src->col[q], &len);
    if (field_is(s, len, "true") || field_is(s, len, "1") || field_is(s, len, "yes")) {
        *out = true;
        return SL_OK;
    }
    if (field_is(s, len, "false") || field_is(s, len, "0") || field_is(s, len, "no") ||
        sl_csv_is_empty(src->csv, (size_t)src->col[q]))
        return SL_OK;
    sl_diag_add(diag, SL_SEV_ERROR, sl_csv_name(src->csv), sl_csv_line(src->csv),
                src->col[q] + 1, "%s \"%.*s\" is not true, false, 1 or 0", specs[q].canonical,
                (int)(len > 40 ? 40 : len), s);
    return SL_EINPUT;
}

sl_status sl_rowsrc_direction(int *out, const sl_rowsrc *src, sl_diag *diag)
{
    *out = 0;
    long col = src->col[SL_ROW_DIRECTION];
    if (col < 0)
        return SL_OK;
    size_t len;
    const char *s = sl_csv_field(src->csv, (size_t)col, &len);
    if (field_is(s, len, "forward") || field_is(s, len, "fwd")) {
        *out = 1;
        return SL_OK;
    }
    if (field_is(s, len, "reverse") || field_is(s, len, "rev") || field_is(s, len, "backward")) {
        *out = -1;
        return SL_OK;
    }
    sl_diag_add(diag, SL_SEV_ERROR, sl_csv_name(src->csv), sl_csv_line(src->csv), col + 1,
                "direction \"%.*s\" is not forward or reverse", (int)(len > 40 ? 40 : len), s);
    return SL_EINPUT;
}

/* ---- text and raw rows ---- */

const char *sl_rowsrc_field(const sl_rowsrc *src, sl_row_quantity q, size_t *len)
{
    if (src->col[q] < 0) {
        if (len)
            *len = 0;
        return "";
    }
    return sl_csv_field(src->csv, (size_t)src->col[q], len);
}

uint64_t sl_rowsrc_field_word(const sl_rowsrc *src, sl_row_quantity q, size_t *len)
{
    if (src->col[q] < 0) {
        *len = 0;
        return 0;
    }
    return sl_csv_field_word(src->csv, (size_t)src->col[q], len);
}

sl_status sl_rowsrc_text(const char **out, size_t *len, const sl_rowsrc *src, sl_row_quantity q,
                         size_t max_bytes, sl_diag *diag)
{
    return sl_csv_text(out, len, src->csv, (size_t)src->col[q], max_bytes, diag);
}

static int append(char **buf, size_t *len, size_t *cap, const char *s, size_t n)
{
    if (*len + n + 1 > *cap) {
        size_t want = *cap ? *cap : 4096;
        while (want < *len + n + 1)
            want *= 2;
        char *grown = realloc(*buf, want);
        if (!grown)
            return -1;
        *buf = grown;
        *cap = want;
    }
    memcpy(*buf + *len, s, n);
    *len += n;
    (*buf)[*len] = '\0';
    return 0;
}

static int append_field(char **buf, size_t *len, size_t *cap, const char *s, size_t n, char sep)
{
    bool quote = false;
    for (size_t i = 0; i < n && !quote; i++)
        quote = s[i] == sep || s[i] == '"' || s[i] == '\n' || s[i] == '\r';
    if (!quote)
        return append(buf, len, cap, s, n);
    int rc = append(buf, len, cap, "\"", 1);
    for (size_t i = 0; rc == 0 && i < n; i++)
        rc = s[i] == '"' ? append(buf, len, cap, "\"\"", 2) : append(buf, len, cap, s + i, 1);
    return rc == 0 ? append(buf, len, cap, "\"", 1) : rc;
}

int sl_rowsrc_format(char **buf, size_t *len, size_t *cap, const sl_rowsrc *src, int which_row,
                     const char *extra)
{
    char sep = sl_csv_separator(src->csv);
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < src->n_columns; i++) {
        size_t n;
        const char *f = which_row ? sl_csv_field(src->csv, i, &n)
                                  : sl_csv_column_name(src->csv, i);
        if (!which_row)
            n = strlen(f);
        if (i)
            rc = append(buf, len, cap, &sep, 1);
        if (rc == 0)
            rc = append_field(buf, len, cap, f, n, sep);
    }
    if (rc == 0 && extra) {
        rc = append(buf, len, cap, &sep, 1);
        if (rc == 0)
            rc = append_field(buf, len, cap, extra, strlen(extra), sep);
    }
    return rc == 0 ? append(buf, len, cap, "\n", 1) : rc;
}
