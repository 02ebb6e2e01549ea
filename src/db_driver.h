/* SPDX-License-Identifier: MIT
 * The store's private database layer: one small statement interface (prepare,
 * bind, step, read columns, reset) over two drivers, an SQLite file
 * (db_sqlite.c) and a PostgreSQL server through libpq (db_pg.c). Statements
 * are written with ?N placeholders; the PostgreSQL driver numbers them $N.
 */
#ifndef SL_DB_DRIVER_H
#define SL_DB_DRIVER_H

#include <stddef.h>

typedef struct sl__db sl__db;
typedef struct sl__stmt sl__stmt;

typedef enum { SL__DB_SQLITE = 0, SL__DB_PG = 1 } sl__db_kind;

/* Results of sl__db_step and of calls returning int. */
enum { SL__DB_OK = 0, SL__DB_FAIL = 1, SL__DB_ROW = 100, SL__DB_DONE = 101 };

/* What the last failure of a connection was, for messages that say what to do. */
typedef enum {
    SL__DBE_OTHER = 0,
    SL__DBE_UNIQUE,       /* a unique key: the row exists */
    SL__DBE_PRIMARYKEY,   /* the primary key: the row exists */
    SL__DBE_FOREIGNKEY,
    SL__DBE_CHECK,
    SL__DBE_NOTNULL,
    SL__DBE_CONSTRAINT,   /* another constraint */
    SL__DBE_READONLY,
    SL__DBE_FULL,
    SL__DBE_IOERR,
    SL__DBE_CANTOPEN,
    SL__DBE_NOTADB,
    SL__DBE_BUSY,         /* another writer holds the lock */
    SL__DBE_CONNECTION,   /* the server cannot be reached or went away */
    SL__DBE_AUTH,         /* the server refused the user or password */
    SL__DBE_TIMEOUT,      /* a statement ran past the server's statement_timeout */
    SL__DBE_SERIALIZE,    /* a snapshot transaction met a concurrent change */
    SL__DBE_NODB          /* the server has no database of that name */
} sl__db_errkind;

/* Statements whose rows are read in chunks (a server-side cursor on
 * PostgreSQL inside a transaction), so a long read does not sit in memory. */
enum { SL__DB_STREAM = 1 };

/* 1 when location names a PostgreSQL server (postgresql:// or postgres://). */
int sl__db_is_url(const char *location);

/* Open a connection; on failure *out may still be set (for sl__db_errmsg),
 * and must be closed. */
int sl__db_open(sl__db **out, const char *location);
void sl__db_close(sl__db *db);

sl__db_kind sl__db_kind_of(const sl__db *db);
const char *sl__db_errmsg(sl__db *db);
sl__db_errkind sl__db_errkind_of(sl__db *db);
int sl__db_syserr(sl__db *db);       /* errno behind an I/O failure, or 0 */
int sl__db_readonly(sl__db *db);     /* SQLite: the file cannot be written */
int sl__db_in_transaction(sl__db *db);
long sl__db_changes(sl__db *db);     /* rows changed by the last statement */

/* One or more statements separated by ';', no parameters, no rows. */
int sl__db_exec(sl__db *db, const char *sql);

int sl__db_prepare(sl__db *db, const char *sql, int flags, sl__stmt **out);
int sl__db_step(sl__stmt *st);       /* SL__DB_ROW, SL__DB_DONE or SL__DB_FAIL */
void sl__db_reset(sl__stmt *st);     /* keeps the bindings */
void sl__db_finalize(sl__stmt *st);  /* NULL is fine */

/* Bindings are copied; index from 1. */
void sl__db_bind_int64(sl__stmt *st, int index, long long v);
void sl__db_bind_double(sl__stmt *st, int index, double v);
void sl__db_bind_text(sl__stmt *st, int index, const char *text, int len); /* len < 0: strlen */
void sl__db_bind_blob(sl__stmt *st, int index, const void *data, size_t bytes);
void sl__db_bind_null(sl__stmt *st, int index);

/* Columns of the current row, from 0; values valid until the next step or
 * reset. A NULL reads as 0, 0.0, a NULL text and an empty blob. */
int sl__db_column_is_null(sl__stmt *st, int col);
long long sl__db_column_int64(sl__stmt *st, int col);
double sl__db_column_double(sl__stmt *st, int col);
const char *sl__db_column_text(sl__stmt *st, int col);
const void *sl__db_column_blob(sl__stmt *st, int col);
size_t sl__db_column_bytes(sl__stmt *st, int col);

/* ---- what the drivers provide (db_driver.c dispatches) ---- */

typedef struct {
    void (*close)(sl__db *db);
    const char *(*errmsg)(sl__db *db);
    sl__db_errkind (*errkind)(sl__db *db);
    int (*syserr)(sl__db *db);
    int (*readonly)(sl__db *db);
    int (*in_transaction)(sl__db *db);
    long (*changes)(sl__db *db);
    int (*exec)(sl__db *db, const char *sql);
    int (*prepare)(sl__db *db, const char *sql, int flags, sl__stmt **out);
    int (*step)(sl__stmt *st);
    void (*reset)(sl__stmt *st);
    void (*finalize)(sl__stmt *st);
    void (*bind_int64)(sl__stmt *st, int index, long long v);
    void (*bind_double)(sl__stmt *st, int index, double v);
    void (*bind_text)(sl__stmt *st, int index, const char *text, int len);
    void (*bind_blob)(sl__stmt *st, int index, const void *data, size_t bytes);
    void (*bind_null)(sl__stmt *st, int index);
    int (*column_is_null)(sl__stmt *st, int col);
    long long (*column_int64)(sl__stmt *st, int col);
    double (*column_double)(sl__stmt *st, int col);
    const char *(*column_text)(sl__stmt *st, int col);
    const void *(*column_blob)(sl__stmt *st, int col);
    size_t (*column_bytes)(sl__stmt *st, int col);
} sl__db_ops;

/* Each driver's connection and statement structs start with these. */
struct sl__db {
    const sl__db_ops *ops;
    sl__db_kind kind;
};
struct sl__stmt {
    const sl__db_ops *ops;
};

int sl__db_sqlite_open(sl__db **out, const char *path);
int sl__db_pg_open(sl__db **out, const char *url);

/* ---- PostgreSQL only: rows into a table by COPY ... FROM STDIN ---- */

/* Start a COPY (sql is the COPY statement); rows then go in by copy_put,
 * raw in the COPY's format, and copy_end finishes it (abort_reason NULL) or
 * abandons it (the server refuses the COPY with that reason). While a COPY
 * is open, any other statement on the connection first calls the
 * connection's settle hook (set with sl__db_pg_set_settle), which is to
 * finish the COPY and whatever goes with it; without a hook the COPY is
 * just finished. A failing hook fails the statement. */
int sl__db_pg_copy_begin(sl__db *db, const char *sql);
int sl__db_pg_copy_put(sl__db *db, const void *data, size_t bytes);
int sl__db_pg_copy_end(sl__db *db, const char *abort_reason);
int sl__db_pg_copying(sl__db *db);
void sl__db_pg_set_settle(sl__db *db, int (*settle)(void *ctx), void *ctx);

#endif
