/* SPDX-License-Identifier: MIT
 * Rendering of command output as a terminal table, CSV (RFC 4180) or JSON
 * (see output.h): every format writes a table row by row, whether the rows
 * were kept or come from a streamed table's callback. Allocation failures
 * abort the command cleanly via exit 1, since the command layer, unlike the
 * library, may end the process.
 */
#include "output.h"

#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

typedef enum { COL_STR, COL_NUM, COL_FIXED, COL_INT, COL_BOOL, COL_LIST, COL_RANGE, COL_OBJECT } col_kind;

typedef struct {
    char *key, *header;
    col_kind kind;
    int digits;
} column;

typedef struct {
    double num, num2;
    char *text; /* strings and lists ('\x1f'-separated items) */
    int count;  /* list length */
} cell;

typedef struct row_visitor row_visitor;

struct cli_table {
    char *key, *title;
    column *cols;
    int ncols;
    cell *cells; /* row-major; a streamed table's one row in the making */
    size_t nrows, cap_rows;
    int next_col;
    cli_rows_fn fill;      /* streamed: rows come from here when printed */
    void *fill_ctx;
    row_visitor *visitor;  /* streamed, while printed: where rows go */
};

/* Sizing a column of an aligned table: the widest text so far and, for
 * fixed-point and integer columns, the finite values of each sign with the
 * largest magnitude, whose text is the widest of that sign ("%.Nf" grows with
 * the magnitude; a minus sign, even of -0, adds one), so a long column is
 * sized without printing every number. */
typedef struct {
    int width;
    int has_neg, has_pos;
    double neg, pos;
} col_size;

/* What printing does with each row of a table, in order. */
struct row_visitor {
    void (*row)(row_visitor *v, const cli_table *t, const cell *cells);
    FILE *out;
    size_t count;    /* rows visited so far */
    int *width;      /* aligned table: column widths */
    col_size *size;  /* aligned table, while sizing */
};

typedef struct {
    char *key, *text;
    double num;
    int digits; /* < 0: text value; SCALAR_LIST: '\x1f'-separated strings */
    int count;  /* items of a list */
} scalar;

#define SCALAR_LIST (-2)

struct cli_doc {
    scalar *scalars;
    int nscalars;
    cli_table **tables;
    int ntables;
    char **notes;
    int nnotes;
};

static void *xrealloc(void *p, size_t n)
{
    void *q = realloc(p, n ? n : 1);
    if (!q) {
        fputs("splitlot: error: out of memory\n", stderr);
        exit(1);
    }
    return q;
}

static char *xstrdup(const char *s)
{
    size_t n = strlen(s ? s : "") + 1;
    char *d = xrealloc(NULL, n);
    memcpy(d, s ? s : "", n);
    return d;
}

int cli_format_parse(const char *text, cli_format *out)
{
    static const char *names[] = { "table", "csv", "json" };
    for (int i = 0; i < 3; i++)
        if (text && strcmp(text, names[i]) == 0) {
            *out = (cli_format)i;
            return 0;
        }
    return -1;
}

cli_doc *cli_doc_new(void)
{
    cli_doc *doc = xrealloc(NULL, sizeof *doc);
    memset(doc, 0, sizeof *doc);
    return doc;
}

static void free_cell_texts(cell *cells, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        free(cells[i].text);
        cells[i].text = NULL;
    }
}

static void table_free(cli_table *t)
{
    free_cell_texts(t->cells, t->nrows * (size_t)t->ncols);
    for (int c = 0; c < t->ncols; c++) {
        free(t->cols[c].key);
        free(t->cols[c].header);
    }
    free(t->cells);
    free(t->cols);
    free(t->key);
    free(t->title);
    free(t);
}

void cli_doc_free(cli_doc *doc)
{
    if (!doc)
        return;
    for (int i = 0; i < doc->nscalars; i++) {
        free(doc->scalars[i].key);
        free(doc->scalars[i].text);
    }
    for (int i = 0; i < doc->ntables; i++)
        table_free(doc->tables[i]);
    for (int i = 0; i < doc->nnotes; i++)
        free(doc->notes[i]);
    free(doc->scalars);
    free(doc->tables);
    free(doc->notes);
    free(doc);
}

static scalar *add_scalar(cli_doc *doc, const char *key)
{
    doc->scalars = xrealloc(doc->scalars, (size_t)(doc->nscalars + 1) * sizeof(scalar));
    scalar *s = &doc->scalars[doc->nscalars++];
    memset(s, 0, sizeof *s);
    s->key = xstrdup(key);
    return s;
}

void cli_doc_str(cli_doc *doc, const char *key, const char *value)
{
    scalar *s = add_scalar(doc, key);
    s->text = xstrdup(value);
    s->digits = -1;
}

void cli_doc_num(cli_doc *doc, const char *key, double value, int digits)
{
    scalar *s = add_scalar(doc, key);
    s->num = value;
    s->digits = digits;
}

/* Items joined with '\x1f' (the list cells' form). */
static char *join_items(const char *const *items, int count)
{
    size_t n = 1;
    for (int i = 0; i < count; i++)
        n += strlen(items[i]) + 1;
    char *text = xrealloc(NULL, n);
    text[0] = '\0';
    for (int i = 0; i < count; i++) {
        if (i)
            strcat(text, "\x1f");
        strcat(text, items[i]);
    }
    return text;
}

void cli_doc_list(cli_doc *doc, const char *key, const char *const *items, int count)
{
    scalar *s = add_scalar(doc, key);
    s->text = join_items(items, count);
    s->count = count;
    s->digits = SCALAR_LIST;
}

/* A list scalar in plain form: items separated by sep. */
static void print_list_plain(FILE *out, const scalar *s, const char *sep)
{
    for (const char *p = s->text; *p; p++) {
        if (*p == '\x1f')
            fputs(sep, out);
        else
            fputc(*p, out);
    }
}

void cli_doc_note(cli_doc *doc, const char *text)
{
    doc->notes = xrealloc(doc->notes, (size_t)(doc->nnotes + 1) * sizeof(char *));
    doc->notes[doc->nnotes++] = xstrdup(text);
}

cli_table *cli_doc_table(cli_doc *doc, const char *key, const char *title)
{
    cli_table *t = xrealloc(NULL, sizeof *t);
    memset(t, 0, sizeof *t);
    t->key = xstrdup(key);
    t->title = xstrdup(title);
    doc->tables = xrealloc(doc->tables, (size_t)(doc->ntables + 1) * sizeof(cli_table *));
    doc->tables[doc->ntables++] = t;
    return t;
}

cli_table *cli_doc_table_streamed(cli_doc *doc, const char *key, const char *title,
                                  cli_rows_fn fill, void *ctx)
{
    cli_table *t = cli_doc_table(doc, key, title);
    t->fill = fill;
    t->fill_ctx = ctx;
    return t;
}

static void add_col(cli_table *t, const char *key, const char *header, col_kind kind, int digits)
{
    t->cols = xrealloc(t->cols, (size_t)(t->ncols + 1) * sizeof(column));
    column *c = &t->cols[t->ncols++];
    c->key = xstrdup(key);
    c->header = xstrdup(header);
    c->kind = kind;
    c->digits = digits;
}

void cli_table_col_str(cli_table *t, const char *k, const char *h) { add_col(t, k, h, COL_STR, 0); }
void cli_table_col_num(cli_table *t, const char *k, const char *h, int d) { add_col(t, k, h, COL_NUM, d); }
void cli_table_col_fixed(cli_table *t, const char *k, const char *h, int d) { add_col(t, k, h, COL_FIXED, d); }
void cli_table_col_int(cli_table *t, const char *k, const char *h) { add_col(t, k, h, COL_INT, 0); }
void cli_table_col_bool(cli_table *t, const char *k, const char *h) { add_col(t, k, h, COL_BOOL, 0); }
void cli_table_col_list(cli_table *t, const char *k, const char *h) { add_col(t, k, h, COL_LIST, 0); }
void cli_table_col_range(cli_table *t, const char *k, const char *h, int d) { add_col(t, k, h, COL_RANGE, d); }
void cli_table_col_object(cli_table *t, const char *k, const char *h) { add_col(t, k, h, COL_OBJECT, 0); }

static void internal_error(const char *what)
{
    fprintf(stderr, "splitlot: internal error: %s\n", what);
    exit(1);
}

/* A streamed table's finished row goes to the printer, and is forgotten. */
static void emit_pending(cli_table *t)
{
    if (t->nrows == 0)
        return;
    t->visitor->row(t->visitor, t, t->cells);
    t->visitor->count++;
    free_cell_texts(t->cells, (size_t)t->ncols);
    t->nrows = 0;
}

void cli_table_row(cli_table *t)
{
    if (t->fill) {
        if (!t->visitor)
            internal_error("row of a streamed table outside its printing");
        emit_pending(t);
    }
    if (t->nrows == t->cap_rows) {
        t->cap_rows = t->cap_rows ? 2 * t->cap_rows : 16;
        t->cells = xrealloc(t->cells, t->cap_rows * (size_t)t->ncols * sizeof(cell));
    }
    memset(&t->cells[t->nrows * (size_t)t->ncols], 0, (size_t)t->ncols * sizeof(cell));
    for (int c = 0; c < t->ncols; c++)
        t->cells[t->nrows * (size_t)t->ncols + (size_t)c].num = NAN;
    t->nrows++;
    t->next_col = 0;
}

static cell *next_cell(cli_table *t)
{
    if (t->nrows == 0 || t->next_col >= t->ncols)
        internal_error("table cell out of range");
    return &t->cells[(t->nrows - 1) * (size_t)t->ncols + (size_t)t->next_col++];
}

void cli_cell_str(cli_table *t, const char *v) { next_cell(t)->text = xstrdup(v); }
void cli_cell_num(cli_table *t, double v) { next_cell(t)->num = v; }
void cli_cell_int(cli_table *t, long v) { next_cell(t)->num = (double)v; }
void cli_cell_bool(cli_table *t, bool v) { next_cell(t)->num = v ? 1.0 : 0.0; }

void cli_cell_range(cli_table *t, double lo, double hi)
{
    cell *c = next_cell(t);
    c->num = lo;
    c->num2 = hi;
}

void cli_cell_list(cli_table *t, const char *const *items, int count)
{
    cell *c = next_cell(t);
    size_t n = 1;
    for (int i = 0; i < count; i++)
        n += strlen(items[i]) + 1;
    c->text = xrealloc(NULL, n);
    c->text[0] = '\0';
    for (int i = 0; i < count; i++) {
        if (i)
            strcat(c->text, "\x1f");
        strcat(c->text, items[i]);
    }
    c->count = count;
}

void cli_cell_object(cli_table *t, const char *const *keys, const long *values, int count)
{
    cell *c = next_cell(t);
    size_t n = 1;
    for (int i = 0; i < count; i++)
        n += strlen(keys[i]) + 24;
    c->text = xrealloc(NULL, n);
    size_t k = 0;
    c->text[0] = '\0';
    for (int i = 0; i < count; i++)
        k += (size_t)snprintf(c->text + k, n - k, "%s%s\x1e%ld", i ? "\x1f" : "", keys[i], values[i]);
    c->count = count;
}

/* ---- formatting of one cell as plain text (table and CSV) ---- */

static void format_number(char *buf, size_t n, double v, const column *col)
{
    if (isnan(v))
        buf[0] = '\0';
    else if (col->kind == COL_FIXED)
        snprintf(buf, n, "%.*f", col->digits, v);
    else if (col->kind == COL_INT)
        snprintf(buf, n, "%.0f", v);
    else
        snprintf(buf, n, "%.*g", col->digits > 0 ? col->digits : 6, v);
}

static void format_plain(char *buf, size_t n, const cell *c, const column *col, const char *sep)
{
    switch (col->kind) {
    case COL_STR:
        snprintf(buf, n, "%s", c->text ? c->text : "");
        break;
    case COL_BOOL:
        snprintf(buf, n, "%s", isnan(c->num) ? "" : (c->num != 0.0 ? "yes" : "no"));
        break;
    case COL_LIST:
    case COL_OBJECT: {
        size_t k = 0;
        for (const char *p = c->text ? c->text : ""; *p && k + 4 < n; p++) {
            if (*p == '\x1f')
                k += (size_t)snprintf(buf + k, n - k, "%s", sep);
            else
                buf[k++] = *p == '\x1e' ? '=' : *p;
        }
        buf[k] = '\0';
        if (k == 0)
            snprintf(buf, n, "-");
        break;
    }
    case COL_RANGE: {
        char a[64], b[64];
        if (isnan(c->num) && isnan(c->num2)) {
            buf[0] = '\0';
            break;
        }
        format_number(a, sizeof a, c->num, col);
        format_number(b, sizeof b, c->num2, col);
        snprintf(buf, n, "%s..%s", a, b);
        break;
    }
    default:
        format_number(buf, n, c->num, col);
    }
}

/* ---- JSON ---- */

static bool json_plain(unsigned char c) { return c >= 0x20 && c != '"' && c != '\\'; }

static void json_string(FILE *out, const char *s)
{
    fputc('"', out);
    const unsigned char *p = (const unsigned char *)(s ? s : "");
    while (*p) {
        size_t run = 0; /* characters that go out as they are, in one write */
        while (p[run] && json_plain(p[run]))
            run++;
        fwrite(p, 1, run, out);
        p += run;
        if (!*p)
            break;
        if (*p == '"' || *p == '\\')
            fprintf(out, "\\%c", *p);
        else if (*p == '\n')
            fputs("\\n", out);
        else
            fprintf(out, "\\u%04x", *p);
        p++;
    }
    fputc('"', out);
}

static void json_number(FILE *out, double v)
{
    if (!isfinite(v))
        fputs("null", out);
    else
        fprintf(out, "%.10g", v);
}

static void json_cell(FILE *out, const cell *c, const column *col)
{
    switch (col->kind) {
    case COL_STR:
        json_string(out, c->text);
        break;
    case COL_BOOL:
        fputs(isnan(c->num) ? "null" : (c->num != 0.0 ? "true" : "false"), out);
        break;
    case COL_LIST: {
        fputc('[', out);
        const char *p = c->text ? c->text : "";
        for (int i = 0; i < c->count; i++) {
            const char *end = strchr(p, '\x1f');
            size_t len = end ? (size_t)(end - p) : strlen(p);
            char *item = xrealloc(NULL, len + 1);
            memcpy(item, p, len);
            item[len] = '\0';
            if (i)
                fputs(", ", out);
            json_string(out, item);
            free(item);
            p += len + (end ? 1 : 0);
        }
        fputc(']', out);
        break;
    }
    case COL_OBJECT: {
        fputc('{', out);
        const char *p = c->text ? c->text : "";
        for (int i = 0; i < c->count; i++) {
            const char *mid = strchr(p, '\x1e'), *end = strchr(p, '\x1f');
            size_t len = (size_t)(mid - p);
            char *name = xrealloc(NULL, len + 1);
            memcpy(name, p, len);
            name[len] = '\0';
            fputs(i ? ", " : "", out);
            json_string(out, name);
            fprintf(out, ": %ld", strtol(mid + 1, NULL, 10));
            free(name);
            p = end ? end + 1 : mid + strlen(mid);
        }
        fputc('}', out);
        break;
    }
    case COL_RANGE:
        if (isnan(c->num) && isnan(c->num2)) { /* no interval at all */
            fputs("null", out);
            break;
        }
        fputc('[', out);
        json_number(out, c->num);
        fputs(", ", out);
        json_number(out, c->num2);
        fputc(']', out);
        break;
    case COL_INT:
        if (isnan(c->num))
            fputs("null", out);
        else
            fprintf(out, "%.0f", c->num);
        break;
    default:
        json_number(out, c->num);
    }
}

/* Every row of a table to a visitor: the kept ones, or a streamed table's
 * as its callback makes them. Returns 0, or -1 when the callback failed. */
static int each_row(cli_table *t, row_visitor *v)
{
    if (!t->fill) {
        for (size_t r = 0; r < t->nrows; r++, v->count++)
            v->row(v, t, &t->cells[r * (size_t)t->ncols]);
        return 0;
    }
    t->visitor = v;
    t->nrows = 0;
    int rc = t->fill(t, t->fill_ctx);
    if (rc == 0)
        emit_pending(t);
    free_cell_texts(t->cells, t->nrows * (size_t)t->ncols);
    t->nrows = 0;
    t->visitor = NULL;
    return rc == 0 ? 0 : -1;
}

static void json_row(row_visitor *v, const cli_table *t, const cell *cells)
{
    fputs(v->count ? ",\n    {" : "\n    {", v->out);
    for (int c = 0; c < t->ncols; c++) {
        if (c)
            fputs(", ", v->out);
        json_string(v->out, t->cols[c].key);
        fputs(": ", v->out);
        json_cell(v->out, &cells[c], &t->cols[c]);
    }
    fputc('}', v->out);
}

static void json_list(FILE *out, const scalar *s)
{
    fputc('[', out);
    const char *p = s->text;
    for (int i = 0; i < s->count; i++) {
        const char *end = strchr(p, '\x1f');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        char *item = xrealloc(NULL, len + 1);
        memcpy(item, p, len);
        item[len] = '\0';
        fputs(i ? ", " : "", out);
        json_string(out, item);
        free(item);
        p += len + (end ? 1 : 0);
    }
    fputc(']', out);
}

/* Length of the "group." part of a scalar's key (0 without a dot). */
static size_t group_len(const scalar *s)
{
    const char *dot = strchr(s->key, '.');
    return dot ? (size_t)(dot - s->key) + 1 : 0;
}

static int same_group(const scalar *a, const scalar *b)
{
    size_t n = group_len(a);
    return n && n == group_len(b) && strncmp(a->key, b->key, n) == 0;
}

/* A scalar's key, opening its group's object when it is the group's first. */
static void json_scalar_key(FILE *out, const cli_doc *doc, int i, int first)
{
    const scalar *s = &doc->scalars[i];
    size_t n = group_len(s);
    if (n && i > 0 && same_group(&doc->scalars[i - 1], s)) {
        fputs(", ", out);
    } else {
        fputs(first ? "\n  " : ",\n  ", out);
        if (n) {
            fprintf(out, "\"%.*s\": {", (int)(n - 1), s->key);
        }
    }
    json_string(out, s->key + n);
    fputs(": ", out);
}

static int print_json(const cli_doc *doc, FILE *out)
{
    fputs("{", out);
    int first = 1;
    for (int i = 0; i < doc->nscalars; i++, first = 0) {
        json_scalar_key(out, doc, i, first);
        if (doc->scalars[i].digits == SCALAR_LIST)
            json_list(out, &doc->scalars[i]);
        else if (doc->scalars[i].digits < 0)
            json_string(out, doc->scalars[i].text);
        else
            json_number(out, doc->scalars[i].num);
        if (group_len(&doc->scalars[i]) &&
            (i + 1 == doc->nscalars || !same_group(&doc->scalars[i], &doc->scalars[i + 1])))
            fputc('}', out);
    }
    for (int i = 0; i < doc->ntables; i++, first = 0) {
        cli_table *t = doc->tables[i];
        row_visitor v = { json_row, out, 0, NULL, NULL };
        fputs(first ? "\n  " : ",\n  ", out);
        json_string(out, t->key);
        fputs(": [", out);
        if (each_row(t, &v) != 0)
            return -1;
        fputs(v.count ? "\n  ]" : "]", out);
    }
    fputs("\n}\n", out);
    return 0;
}

/* ---- CSV ---- */

static void csv_field(FILE *out, const char *s)
{
    if (strpbrk(s, ",\"\r\n")) {
        fputc('"', out);
        for (; *s; s++) {
            if (*s == '"')
                fputc('"', out);
            fputc(*s, out);
        }
        fputc('"', out);
    } else {
        fputs(s, out);
    }
}

static void csv_number(char *buf, size_t n, double v)
{
    if (isnan(v))
        buf[0] = '\0';
    else
        snprintf(buf, n, "%.10g", v);
}

static void csv_row(row_visitor *v, const cli_table *t, const cell *cells)
{
    char buf[4096];
    for (int c = 0; c < t->ncols; c++) {
        const cell *ce = &cells[c];
        const column *co = &t->cols[c];
        if (c)
            fputc(',', v->out);
        if (co->kind == COL_NUM || co->kind == COL_FIXED)
            csv_number(buf, sizeof buf, ce->num);
        else if (co->kind == COL_BOOL)
            snprintf(buf, sizeof buf, "%s", isnan(ce->num) ? "" : (ce->num != 0.0 ? "true" : "false"));
        else
            format_plain(buf, sizeof buf, ce, co, ";");
        csv_field(v->out, buf);
    }
    fputs("\r\n", v->out);
}

static int print_csv(const cli_doc *doc, FILE *out)
{
    for (int i = 0; i < doc->nscalars; i++) {
        fprintf(out, "# %s: ", doc->scalars[i].key);
        if (doc->scalars[i].digits == SCALAR_LIST) {
            print_list_plain(out, &doc->scalars[i], "; ");
            fputc('\n', out);
        } else if (doc->scalars[i].digits < 0)
            fprintf(out, "%s\n", doc->scalars[i].text);
        else
            fprintf(out, "%.10g\n", doc->scalars[i].num);
    }
    for (int i = 0; i < doc->ntables; i++) {
        cli_table *t = doc->tables[i];
        row_visitor v = { csv_row, out, 0, NULL, NULL };
        if (doc->ntables > 1)
            fprintf(out, "%s# %s\n", i ? "\n" : "", t->key);
        for (int c = 0; c < t->ncols; c++) {
            if (c)
                fputc(',', out);
            csv_field(out, t->cols[c].key);
        }
        fputs("\r\n", out);
        if (each_row(t, &v) != 0)
            return -1;
    }
    return 0;
}

/* ---- aligned table ---- */

static int is_numeric(const column *c)
{
    return c->kind == COL_NUM || c->kind == COL_FIXED || c->kind == COL_INT || c->kind == COL_RANGE;
}

static void size_extreme(col_size *z, double v)
{
    if (signbit(v)) {
        if (!z->has_neg || v < z->neg)
            z->neg = v;
        z->has_neg = 1;
    } else {
        if (!z->has_pos || v > z->pos)
            z->pos = v;
        z->has_pos = 1;
    }
}

static int plain_width(const cell *c, const column *col)
{
    char buf[4096];
    format_plain(buf, sizeof buf, c, col, ",");
    return (int)strlen(buf);
}

/* Widest cell of each column so far (a first pass over the rows). */
static void measure_row(row_visitor *v, const cli_table *t, const cell *cells)
{
    for (int c = 0; c < t->ncols; c++) {
        const column *col = &t->cols[c];
        col_size *z = &v->size[c];
        if ((col->kind == COL_FIXED || col->kind == COL_INT) && isfinite(cells[c].num)) {
            size_extreme(z, cells[c].num);
            continue;
        }
        int w = plain_width(&cells[c], col);
        if (w > z->width)
            z->width = w;
    }
}

/* Column widths from the sizes: the headers, the widest texts and the texts
 * of the extreme values. */
static void finish_widths(int *width, const col_size *size, const cli_table *t)
{
    for (int c = 0; c < t->ncols; c++) {
        const col_size *z = &size[c];
        cell extreme = { .num = NAN };
        width[c] = (int)strlen(t->cols[c].header);
        if (z->width > width[c])
            width[c] = z->width;
        for (int sign = 0; sign < 2; sign++) {
            if (!(sign ? z->has_neg : z->has_pos))
                continue;
            extreme.num = sign ? z->neg : z->pos;
            int w = plain_width(&extreme, &t->cols[c]);
            if (w > width[c])
                width[c] = w;
        }
    }
}

static void text_row(row_visitor *v, const cli_table *t, const cell *cells)
{
    char buf[4096];
    for (int c = 0; c < t->ncols; c++) {
        format_plain(buf, sizeof buf, &cells[c], &t->cols[c], ",");
        int last = c == t->ncols - 1, w = v->width[c];
        if (last && !is_numeric(&t->cols[c]))
            fprintf(v->out, "%s%s", c ? "  " : "", buf);
        else
            fprintf(v->out, "%s%*s", c ? "  " : "", is_numeric(&t->cols[c]) ? w : -w, buf);
    }
    fputc('\n', v->out);
}

static int print_text_table(cli_table *t, FILE *out)
{
    size_t n = (size_t)(t->ncols ? t->ncols : 1);
    int *width = xrealloc(NULL, n * sizeof(int));
    col_size *size = xrealloc(NULL, n * sizeof *size);
    memset(size, 0, n * sizeof *size);
    row_visitor measure = { measure_row, out, 0, width, size }, print = { text_row, out, 0, width, NULL };
    int rc = each_row(t, &measure);
    finish_widths(width, size, t);
    free(size);
    if (rc == 0 && t->title && *t->title)
        fprintf(out, "%s\n", t->title);
    for (int c = 0; rc == 0 && c < t->ncols; c++) {
        int last_text = c == t->ncols - 1 && !is_numeric(&t->cols[c]);
        fprintf(out, "%s%*s", c ? "  " : "", last_text ? 0 : (is_numeric(&t->cols[c]) ? width[c] : -width[c]),
                t->cols[c].header);
    }
    if (rc == 0) {
        fputc('\n', out);
        rc = each_row(t, &print);
    }
    free(width);
    return rc;
}

static int print_table(const cli_doc *doc, FILE *out)
{
    for (int i = 0; i < doc->nscalars; i++) {
        if (doc->scalars[i].digits == SCALAR_LIST) {
            fprintf(out, "%s:\n  ", doc->scalars[i].key);
            print_list_plain(out, &doc->scalars[i], "\n  ");
            fputc('\n', out);
        } else if (doc->scalars[i].digits < 0) /* a reader sees '-' for no value */
            fprintf(out, "%s: %s\n", doc->scalars[i].key,
                    doc->scalars[i].text && *doc->scalars[i].text ? doc->scalars[i].text : "-");
        else if (isnan(doc->scalars[i].num))
            fprintf(out, "%s: -\n", doc->scalars[i].key);
        else
            fprintf(out, "%s: %.*g\n", doc->scalars[i].key, doc->scalars[i].digits, doc->scalars[i].num);
    }
    for (int i = 0; i < doc->ntables; i++) {
        if (i || doc->nscalars)
            fputc('\n', out);
        if (print_text_table(doc->tables[i], out) != 0)
            return -1;
    }
    if (doc->nnotes)
        fputc('\n', out);
    for (int i = 0; i < doc->nnotes; i++)
        fprintf(out, "%s\n", doc->notes[i]);
    return 0;
}

int cli_doc_print(cli_doc *doc, cli_format format, FILE *out)
{
    int rc;
    if (format == CLI_FORMAT_JSON)
        rc = print_json(doc, out);
    else if (format == CLI_FORMAT_CSV)
        rc = print_csv(doc, out);
    else
        rc = print_table(doc, out);
    return (fflush(out) == 0 && !ferror(out) && rc == 0) ? 0 : -1;
}
