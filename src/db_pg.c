/* SPDX-License-Identifier: MIT
 * The PostgreSQL driver of the store's database layer (see db_driver.h),
 * over libpq: ?N placeholders become $N, values travel as text (a blob as
 * bytea in binary), rows come back as text and are parsed as read. A
 * statement run a second time is prepared on the server; a statement marked
 * SL__DB_STREAM inside a transaction reads through a cursor in chunks.
 * libpq is loaded when the first server is opened (db_pg_lib.h).
 */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <libpq-fe.h>

#include "db_driver.h"
#include "db_pg_lib.h"

#define PG_BYTEA_OID 17
#define PG_BOOL_OID 16
#define PG_INT8_OID 20
#define PG_FLOAT8_OID 701
#define PG_FETCH_ROWS 2000

typedef struct {
    sl__db base;
    PGconn *conn;
    char message[512];
    sl__db_errkind kind;
    long changes;
    unsigned long names;         /* prepared statements and cursors made so far */
    int copying;                 /* a COPY ... FROM STDIN is open */
    int (*settle)(void *ctx);    /* run before another statement while copying */
    void *settle_ctx;
} pg_db;

typedef struct {
    char *value;                 /* NULL for SQL NULL */
    int length, format;
    unsigned type;
} pg_param;

typedef struct {
    sl__stmt base;
    pg_db *db;
    char *sql;                   /* with $N placeholders */
    int flags;
    int n_params;
    pg_param *params;
    int runs;                    /* executions so far */
    char name[32];               /* the prepared statement's, "" before */
    char cursor[32];             /* the open cursor's, "" when none */
    int cursor_done;             /* the cursor has given its last rows */
    PGresult *res;
    int row, n_rows;
    unsigned char *blob;         /* a bytea column decoded */
    int blob_row, blob_col;
    size_t blob_bytes;
} pg_stmt;

static pg_db *D(sl__db *db) { return (pg_db *)db; }
static pg_stmt *P(sl__stmt *st) { return (pg_stmt *)st; }

/* ---- errors ---- */

static sl__db_errkind kind_of_sqlstate(const char *state)
{
    if (!state)
        return SL__DBE_OTHER;
    if (strcmp(state, "23505") == 0)
        return SL__DBE_UNIQUE;
    if (strcmp(state, "23503") == 0)
        return SL__DBE_FOREIGNKEY;
    if (strcmp(state, "23514") == 0)
        return SL__DBE_CHECK;
    if (strcmp(state, "23502") == 0)
        return SL__DBE_NOTNULL;
    if (strncmp(state, "23", 2) == 0)
        return SL__DBE_CONSTRAINT;
    if (strcmp(state, "57014") == 0)
        return SL__DBE_TIMEOUT;
    if (strncmp(state, "08", 2) == 0 || strncmp(state, "57P", 3) == 0)
        return SL__DBE_CONNECTION;
    if (strncmp(state, "28", 2) == 0)
        return SL__DBE_AUTH;
    if (strcmp(state, "40001") == 0 || strcmp(state, "40P01") == 0)
        return SL__DBE_SERIALIZE;
    if (strcmp(state, "53100") == 0)
        return SL__DBE_FULL;
    if (strcmp(state, "3D000") == 0)
        return SL__DBE_NODB;
    if (strcmp(state, "55P03") == 0)
        return SL__DBE_BUSY;
    if (strcmp(state, "25006") == 0)
        return SL__DBE_READONLY;
    return SL__DBE_OTHER;
}

/* The first line of a libpq message, without "ERROR:" or "FATAL:". */
static void first_line(char *dst, size_t size, const char *text)
{
    if (!text || !*text)
        text = "unknown error";
    for (const char *p = text; *p == ' ';)
        text = ++p;
    if (strncmp(text, "ERROR:  ", 8) == 0 || strncmp(text, "FATAL:  ", 8) == 0)
        text += 8;
    size_t n = strcspn(text, "\n");
    if (n >= size)
        n = size - 1;
    memcpy(dst, text, n);
    dst[n] = '\0';
}

/* Note a failed result (or a lost connection when res is NULL). */
static int fail(pg_db *db, const PGresult *res)
{
    const char *state = res ? PQresultErrorField(res, PG_DIAG_SQLSTATE) : NULL;
    const char *primary = res ? PQresultErrorField(res, PG_DIAG_MESSAGE_PRIMARY) : NULL;
    first_line(db->message, sizeof db->message,
               primary ? primary : PQerrorMessage(db->conn));
    db->kind = kind_of_sqlstate(state);
    const char *constraint = res ? PQresultErrorField(res, PG_DIAG_CONSTRAINT_NAME) : NULL;
    size_t n = constraint ? strlen(constraint) : 0;
    if (db->kind == SL__DBE_UNIQUE && n > 5 && strcmp(constraint + n - 5, "_pkey") == 0)
        db->kind = SL__DBE_PRIMARYKEY;
    if (PQstatus(db->conn) == CONNECTION_BAD)
        db->kind = SL__DBE_CONNECTION;
    return SL__DB_FAIL;
}

/* A result: SL__DB_OK for a command or rows, else the failure noted. */
static int check(pg_db *db, const PGresult *res)
{
    ExecStatusType s = res ? PQresultStatus(res) : PGRES_FATAL_ERROR;
    if (s == PGRES_COMMAND_OK || s == PGRES_TUPLES_OK) {
        db->changes = atol(PQcmdTuples((PGresult *)res));
        return SL__DB_OK;
    }
    return fail(db, res);
}

/* ---- COPY ... FROM STDIN ---- */

static int copy_end(pg_db *db, const char *abort_reason)
{
    if (!db->copying)
        return SL__DB_OK;
    db->copying = 0;
    int rc = SL__DB_OK;
    if (PQputCopyEnd(db->conn, abort_reason) != 1) {
        rc = fail(db, NULL);
        db->kind = SL__DBE_CONNECTION;
    }
    /* the COPY's result, then the end of the command */
    PGresult *res;
    while ((res = PQgetResult(db->conn)) != NULL) {
        if (rc == SL__DB_OK && !abort_reason)
            rc = check(db, res);
        PQclear(res);
    }
    return rc;
}

/* Before any other statement: the open COPY finished through the hook. */
static int settle(pg_db *db)
{
    if (!db->copying)
        return SL__DB_OK;
    int (*hook)(void *) = db->settle;
    if (!hook)
        return copy_end(db, NULL);
    db->settle = NULL; /* the hook's own statements run plainly */
    int rc = hook(db->settle_ctx);
    db->settle = hook;
    if (db->copying) /* a hook that left it open */
        rc = copy_end(db, rc == SL__DB_OK ? NULL : "abandoned") == SL__DB_OK ? rc : SL__DB_FAIL;
    return rc;
}

int sl__db_pg_copy_begin(sl__db *base, const char *sql)
{
    pg_db *db = D(base);
    if (settle(db) != SL__DB_OK)
        return SL__DB_FAIL;
    PGresult *res = PQexec(db->conn, sql);
    int rc = PQresultStatus(res) == PGRES_COPY_IN ? SL__DB_OK : fail(db, res);
    PQclear(res);
    db->copying = rc == SL__DB_OK;
    return rc;
}

int sl__db_pg_copy_put(sl__db *base, const void *data, size_t bytes)
{
    pg_db *db = D(base);
    if (!db->copying || bytes > (size_t)0x7fffffff) {
        snprintf(db->message, sizeof db->message, "no COPY is open for the rows");
        db->kind = SL__DBE_OTHER;
        return SL__DB_FAIL;
    }
    if (PQputCopyData(db->conn, data, (int)bytes) == 1)
        return SL__DB_OK;
    fail(db, NULL);
    db->kind = SL__DBE_CONNECTION; /* only a broken connection refuses the data */
    return SL__DB_FAIL;
}

int sl__db_pg_copy_end(sl__db *base, const char *abort_reason)
{
    return copy_end(D(base), abort_reason);
}

int sl__db_pg_copying(sl__db *base) { return D(base)->copying; }

void sl__db_pg_set_settle(sl__db *base, int (*hook)(void *ctx), void *ctx)
{
    D(base)->settle = hook;
    D(base)->settle_ctx = ctx;
}

/* ---- the connection ---- */

static void db_close(sl__db *db)
{
    if (D(db)->conn) { /* NULL when libpq could not be loaded */
        copy_end(D(db), "the connection closes");
        PQfinish(D(db)->conn);
    }
    free(db);
}

static const char *db_errmsg(sl__db *db) { return D(db)->message; }
static sl__db_errkind db_errkind(sl__db *db) { return D(db)->kind; }
static int db_syserr(sl__db *db)
{
    (void)db;
    return 0;
}
static int db_readonly(sl__db *db)
{
    (void)db;
    return 0;
}
static int db_in_transaction(sl__db *db)
{
    return PQtransactionStatus(D(db)->conn) != PQTRANS_IDLE;
}
static long db_changes(sl__db *db) { return D(db)->changes; }

static int db_exec(sl__db *db, const char *sql)
{
    if (settle(D(db)) != SL__DB_OK)
        return SL__DB_FAIL;
    PGresult *res = PQexec(D(db)->conn, sql);
    int rc = check(D(db), res);
    PQclear(res);
    return rc;
}

/* ---- statements ---- */

/* ?N (and a bare ?, numbered after the highest so far) as $N, outside
 * quoted strings and names; the number of parameters in *n. */
static char *translate(const char *sql, int *n)
{
    size_t len = strlen(sql);
    char *out = malloc(2 * len + 16);
    if (!out)
        return NULL;
    size_t k = 0;
    int highest = 0;
    char quote = 0;
    for (const char *p = sql; *p; p++) {
        if (quote) {
            if (*p == quote)
                quote = 0;
            out[k++] = *p;
        } else if (*p == '\'' || *p == '"') {
            quote = *p;
            out[k++] = *p;
        } else if (*p == '?') {
            char *end = NULL;
            long v = strtol(p + 1, &end, 10);
            if (end == p + 1)
                v = highest + 1;
            if (v > highest)
                highest = (int)v;
            k += (size_t)sprintf(out + k, "$%ld", v);
            p = end - 1;
        } else {
            out[k++] = *p;
        }
    }
    out[k] = '\0';
    *n = highest;
    return out;
}

static const sl__db_ops pg_ops;

static int db_prepare(sl__db *db, const char *sql, int flags, sl__stmt **out)
{
    pg_stmt *st = calloc(1, sizeof *st);
    if (!st)
        return SL__DB_FAIL;
    st->base.ops = &pg_ops;
    st->db = D(db);
    st->flags = flags;
    st->blob_row = -1;
    st->sql = translate(sql, &st->n_params);
    st->params = calloc(st->n_params ? (size_t)st->n_params : 1, sizeof *st->params);
    if (!st->sql || !st->params) {
        free(st->sql);
        free(st->params);
        free(st);
        snprintf(D(db)->message, sizeof D(db)->message, "out of memory");
        D(db)->kind = SL__DBE_OTHER;
        return SL__DB_FAIL;
    }
    *out = &st->base;
    return SL__DB_OK;
}

typedef struct {
    const char **values;
    int *lengths, *formats;
    unsigned *types;
} param_arrays;

static int param_arrays_make(param_arrays *a, const pg_stmt *st)
{
    size_t n = st->n_params ? (size_t)st->n_params : 1;
    a->values = malloc(n * sizeof *a->values);
    a->lengths = malloc(n * sizeof *a->lengths);
    a->formats = malloc(n * sizeof *a->formats);
    a->types = malloc(n * sizeof *a->types);
    if (!a->values || !a->lengths || !a->formats || !a->types)
        return 0;
    for (int i = 0; i < st->n_params; i++) {
        a->values[i] = st->params[i].value;
        a->lengths[i] = st->params[i].length;
        a->formats[i] = st->params[i].format;
        a->types[i] = st->params[i].value ? st->params[i].type : 0;
    }
    return 1;
}

static void param_arrays_free(param_arrays *a)
{
    free(a->values);
    free(a->lengths);
    free(a->formats);
    free(a->types);
}

static void drop_result(pg_stmt *st)
{
    PQclear(st->res);
    st->res = NULL;
    st->row = st->n_rows = 0;
    st->blob_row = -1;
}

/* Run the statement: on its second run it is prepared on the server first. */
static PGresult *run(pg_stmt *st, const char *sql, const param_arrays *a)
{
    PGconn *conn = st->db->conn;
    if (sql != st->sql || st->runs++ == 0)
        return PQexecParams(conn, sql, st->n_params, a->types, a->values, a->lengths, a->formats, 0);
    if (!st->name[0]) {
        char name[32];
        snprintf(name, sizeof name, "sl_s%lu", ++st->db->names);
        PGresult *res = PQprepare(conn, name, st->sql, st->n_params, a->types);
        int ok = PQresultStatus(res) == PGRES_COMMAND_OK;
        if (!ok)
            return res;
        PQclear(res);
        memcpy(st->name, name, sizeof name);
    }
    return PQexecPrepared(conn, st->name, st->n_params, a->values, a->lengths, a->formats, 0);
}

static int fetch(pg_stmt *st)
{
    char sql[64];
    snprintf(sql, sizeof sql, "FETCH %d FROM %s", PG_FETCH_ROWS, st->cursor);
    drop_result(st);
    if (settle(st->db) != SL__DB_OK)
        return SL__DB_FAIL;
    st->res = PQexec(st->db->conn, sql);
    if (check(st->db, st->res) != SL__DB_OK)
        return SL__DB_FAIL;
    st->n_rows = PQntuples(st->res);
    st->cursor_done = st->n_rows < PG_FETCH_ROWS;
    return SL__DB_OK;
}

/* A read in chunks: DECLARE a cursor with the statement's parameters. */
static int open_cursor(pg_stmt *st, const param_arrays *a)
{
    snprintf(st->cursor, sizeof st->cursor, "sl_c%lu", ++st->db->names);
    size_t n = strlen(st->sql) + 64;
    char *sql = malloc(n);
    if (!sql)
        return SL__DB_FAIL;
    snprintf(sql, n, "DECLARE %s NO SCROLL CURSOR FOR %s", st->cursor, st->sql);
    PGresult *res = run(st, sql, a);
    free(sql);
    int rc = check(st->db, res);
    PQclear(res);
    if (rc != SL__DB_OK) {
        st->cursor[0] = '\0';
        return rc;
    }
    return fetch(st);
}

static int execute(pg_stmt *st)
{
    param_arrays a = { 0 };
    int rc = SL__DB_FAIL;
    if (settle(st->db) != SL__DB_OK) {
        /* the open COPY failed to finish: its failure is noted */
    } else if (!param_arrays_make(&a, st)) {
        snprintf(st->db->message, sizeof st->db->message, "out of memory");
    } else if ((st->flags & SL__DB_STREAM) &&
               PQtransactionStatus(st->db->conn) == PQTRANS_INTRANS) {
        rc = open_cursor(st, &a);
    } else {
        st->res = run(st, st->sql, &a);
        rc = check(st->db, st->res);
        st->n_rows = rc == SL__DB_OK ? PQntuples(st->res) : 0;
    }
    param_arrays_free(&a);
    return rc;
}

static int st_step(sl__stmt *base)
{
    pg_stmt *st = P(base);
    if (!st->res && !st->cursor[0]) {
        if (execute(st) != SL__DB_OK) {
            drop_result(st);
            return SL__DB_FAIL;
        }
        st->row = -1;
    }
    if (st->row + 1 < st->n_rows) {
        st->row++;
        st->blob_row = -1;
        return SL__DB_ROW;
    }
    if (st->cursor[0] && !st->cursor_done) {
        if (fetch(st) != SL__DB_OK)
            return SL__DB_FAIL;
        st->row = -1;
        return st_step(base);
    }
    st->row = st->n_rows;
    return SL__DB_DONE;
}

static void close_cursor(pg_stmt *st)
{
    if (!st->cursor[0])
        return;
    if (!st->db->copying && PQtransactionStatus(st->db->conn) == PQTRANS_INTRANS) {
        char sql[64];
        snprintf(sql, sizeof sql, "CLOSE %s", st->cursor);
        PQclear(PQexec(st->db->conn, sql));
    }
    st->cursor[0] = '\0';
    st->cursor_done = 0;
}

static void st_reset(sl__stmt *base)
{
    pg_stmt *st = P(base);
    drop_result(st);
    close_cursor(st);
}

static void st_finalize(sl__stmt *base)
{
    pg_stmt *st = P(base);
    st_reset(base);
    if (st->name[0] && !st->db->copying && PQstatus(st->db->conn) == CONNECTION_OK &&
        PQtransactionStatus(st->db->conn) != PQTRANS_INERROR) {
        char sql[64];
        snprintf(sql, sizeof sql, "DEALLOCATE %s", st->name);
        PQclear(PQexec(st->db->conn, sql));
    }
    for (int i = 0; i < st->n_params; i++)
        free(st->params[i].value);
    free(st->params);
    free(st->blob);
    free(st->sql);
    free(st);
}

/* ---- bindings ---- */

static void set_param(sl__stmt *base, int index, char *value, int length, int format, unsigned type)
{
    pg_stmt *st = P(base);
    if (index < 1 || index > st->n_params) {
        free(value);
        return;
    }
    pg_param *p = &st->params[index - 1];
    free(p->value);
    p->value = value;
    p->length = length;
    p->format = format;
    p->type = type;
}

static void bind_int64(sl__stmt *st, int i, long long v)
{
    char *text = malloc(24);
    if (text)
        snprintf(text, 24, "%lld", v);
    set_param(st, i, text, 0, 0, PG_INT8_OID);
}

static void bind_double(sl__stmt *st, int i, double v)
{
    char *text = malloc(32);
    if (text) {
        if (v != v)
            snprintf(text, 32, "NaN");
        else if (v > 1.7976931348623157e308 || v < -1.7976931348623157e308)
            snprintf(text, 32, "%sInfinity", v < 0 ? "-" : "");
        else
            snprintf(text, 32, "%.17g", v);
    }
    set_param(st, i, text, 0, 0, PG_FLOAT8_OID);
}

static void bind_text(sl__stmt *st, int i, const char *s, int len)
{
    size_t n = len < 0 ? strlen(s) : (size_t)len;
    char *text = malloc(n + 1);
    if (text) {
        memcpy(text, s, n);
        text[n] = '\0';
    }
    set_param(st, i, text, 0, 0, 0);
}

static void bind_blob(sl__stmt *st, int i, const void *data, size_t bytes)
{
    char *copy = malloc(bytes ? bytes : 1);
    if (copy && bytes)
        memcpy(copy, data, bytes);
    set_param(st, i, copy, (int)bytes, 1, PG_BYTEA_OID);
}

static void bind_null(sl__stmt *st, int i) { set_param(st, i, NULL, 0, 0, 0); }

/* ---- columns ---- */

static int has_value(pg_stmt *st, int c)
{
    return st->res && st->row >= 0 && st->row < st->n_rows && c >= 0 &&
           c < PQnfields(st->res) && !PQgetisnull(st->res, st->row, c);
}

static int column_is_null(sl__stmt *st, int c) { return !has_value(P(st), c); }

static long long column_int64(sl__stmt *base, int c)
{
    pg_stmt *st = P(base);
    if (!has_value(st, c))
        return 0;
    const char *v = PQgetvalue(st->res, st->row, c);
    if (PQftype(st->res, c) == PG_BOOL_OID)
        return v[0] == 't';
    return strtoll(v, NULL, 10);
}

static double column_double(sl__stmt *base, int c)
{
    pg_stmt *st = P(base);
    if (!has_value(st, c))
        return 0.0;
    const char *v = PQgetvalue(st->res, st->row, c);
    if (PQftype(st->res, c) == PG_BOOL_OID)
        return v[0] == 't';
    return strtod(v, NULL);
}

static const char *column_text(sl__stmt *base, int c)
{
    pg_stmt *st = P(base);
    return has_value(st, c) ? PQgetvalue(st->res, st->row, c) : NULL;
}

static int hex_digit(char h)
{
    if (h >= '0' && h <= '9')
        return h - '0';
    if (h >= 'a' && h <= 'f')
        return h - 'a' + 10;
    if (h >= 'A' && h <= 'F')
        return h - 'A' + 10;
    return -1;
}

/* bytea's text form, \x and two hex digits a byte, decoded once per cell. */
static void decode_blob(pg_stmt *st, int c)
{
    if (st->blob_row == st->row && st->blob_col == c)
        return;
    st->blob_bytes = 0;
    st->blob_row = st->row;
    st->blob_col = c;
    if (!has_value(st, c))
        return;
    const char *v = PQgetvalue(st->res, st->row, c);
    size_t len = (size_t)PQgetlength(st->res, st->row, c);
    if (len < 2 || v[0] != '\\' || v[1] != 'x')
        return;
    size_t n = (len - 2) / 2;
    unsigned char *buf = realloc(st->blob, n ? n : 1);
    if (!buf)
        return;
    st->blob = buf;
    for (size_t i = 0; i < n; i++) {
        int hi = hex_digit(v[2 + 2 * i]), lo = hex_digit(v[3 + 2 * i]);
        if (hi < 0 || lo < 0)
            return;
        buf[i] = (unsigned char)(hi << 4 | lo);
    }
    st->blob_bytes = n;
}

static const void *column_blob(sl__stmt *base, int c)
{
    pg_stmt *st = P(base);
    decode_blob(st, c);
    return st->blob_bytes ? st->blob : NULL;
}

static size_t column_bytes(sl__stmt *base, int c)
{
    pg_stmt *st = P(base);
    if (has_value(st, c) && PQftype(st->res, c) != PG_BYTEA_OID)
        return (size_t)PQgetlength(st->res, st->row, c);
    decode_blob(st, c);
    return st->blob_bytes;
}

static const sl__db_ops pg_ops = {
    db_close, db_errmsg, db_errkind, db_syserr, db_readonly, db_in_transaction, db_changes,
    db_exec, db_prepare, st_step, st_reset, st_finalize, bind_int64, bind_double, bind_text,
    bind_blob, bind_null, column_is_null, column_int64, column_double, column_text,
    column_blob, column_bytes,
};

/* The library prints nothing: the server's notices are dropped. */
static void ignore_notice(void *arg, const char *message)
{
    (void)arg;
    (void)message;
}

/* Why a connection failed: a refused login or an unreachable server. */
static void connect_failure(pg_db *db)
{
    const char *text = PQerrorMessage(db->conn);
    const char *fatal = strstr(text, "FATAL:  "); /* the server's own words */
    first_line(db->message, sizeof db->message, fatal ? fatal : text);
    if (strstr(text, "FATAL:  database \"") && strstr(text, "\" does not exist")) {
        db->kind = SL__DBE_NODB;
        return;
    }
    db->kind = (PQconnectionNeedsPassword(db->conn) || strstr(text, "authentication failed") ||
                strstr(text, "password") || (strstr(text, "role") && strstr(text, "does not exist")))
                   ? SL__DBE_AUTH
                   : SL__DBE_CONNECTION;
}

int sl__db_pg_open(sl__db **out, const char *url)
{
    pg_db *db = calloc(1, sizeof *db);
    if (!db)
        return SL__DB_FAIL;
    db->base.ops = &pg_ops;
    db->base.kind = SL__DB_PG;
    *out = &db->base;
    if (sl__pq_load(db->message, sizeof db->message) != 0)
        return SL__DB_FAIL; /* said as it is: no server was tried */
    db->conn = PQconnectdb(url);
    if (!db->conn) {
        snprintf(db->message, sizeof db->message, "out of memory");
        return SL__DB_FAIL;
    }
    if (PQstatus(db->conn) != CONNECTION_OK) {
        connect_failure(db);
        return SL__DB_FAIL;
    }
    PQsetNoticeProcessor(db->conn, ignore_notice, NULL);
    /* every double back bit for bit (shortest exact text), notices off */
    return db_exec(&db->base, "SET client_min_messages = warning; SET extra_float_digits = 3");
}
