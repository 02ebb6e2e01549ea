/* SPDX-License-Identifier: MIT
 * The SQLite driver of the store's database layer (see db_driver.h): a file
 * opened read-write (created when missing) with extended result codes, and
 * statements passed straight to SQLite, but for one shape: see
 * rowid_returning. Also hints for the disk (Linux): a long transaction's WAL
 * written out as it grows (sl__db_sqlite_start_writeback), and while a large
 * commit or the closing checkpoint copies pages, a helper thread has them
 * written out as they come (writeback_helper), so the fsync SQLite ends with
 * waits for little.
 */
#if defined(__linux__)
#define _GNU_SOURCE 1 /* sync_file_range */
#endif
#include <fcntl.h>
#include <pthread.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <sqlite3.h>

#include "db_driver.h"

typedef struct {
    sl__db base;
    sqlite3 *handle;
    int wal_fd;                  /* the WAL opened for writeback hints, -1 */
} sqlite_db;

/* Where a statement that gives back the new row's rowid stands. */
typedef enum { ROWID_UNSTEPPED = 0, ROWID_ROW, ROWID_DONE } rowid_state;

typedef struct {
    sl__stmt base;
    sqlite3_stmt *handle;
    int rowid_returning;       /* see rowid_returning */
    rowid_state state;
    sqlite3_int64 rowid;       /* of the row inserted, in state ROWID_ROW */
    char rowid_text[24];
} sqlite_stmt;

static sqlite3 *H(sl__db *db) { return ((sqlite_db *)db)->handle; }
static sqlite3_stmt *S(sl__stmt *st) { return ((sqlite_stmt *)st)->handle; }

/* ---- disk writes ahead of the syncs ---- */

#if defined(__linux__)
static int open_wal(sqlite_db *db);
#endif

/* A WAL at least this large makes a commit or a checkpoint worth a helper. */
#define WRITEBACK_HELPER_WAL_BYTES ((off_t)4 << 20)
#define WRITEBACK_HELPER_PERIOD_NS 1000000L

typedef struct {
    pthread_t thread;
    pthread_mutex_t lock;
    pthread_cond_t wake;
    int stop;                    /* guarded by lock */
    int fd[2];                   /* the database file and its WAL */
} writeback_helper;

#if defined(__linux__)
static void *writeback_helper_main(void *arg)
{
    writeback_helper *h = arg;
    pthread_mutex_lock(&h->lock);
    while (!h->stop) {
        pthread_mutex_unlock(&h->lock);
        for (int i = 0; i < 2; i++)
            (void)sync_file_range(h->fd[i], 0, 0, SYNC_FILE_RANGE_WRITE); /* hints only */
        struct timespec until;
        clock_gettime(CLOCK_REALTIME, &until);
        until.tv_nsec += WRITEBACK_HELPER_PERIOD_NS;
        if (until.tv_nsec >= 1000000000L) {
            until.tv_sec++;
            until.tv_nsec -= 1000000000L;
        }
        pthread_mutex_lock(&h->lock);
        if (!h->stop)
            pthread_cond_timedwait(&h->wake, &h->lock, &until);
    }
    pthread_mutex_unlock(&h->lock);
    return NULL;
}

static void writeback_helper_release(writeback_helper *h)
{
    for (int i = 0; i < 2; i++)
        if (h->fd[i] >= 0)
            close(h->fd[i]);
    pthread_cond_destroy(&h->wake);
    pthread_mutex_destroy(&h->lock);
    free(h);
}
#endif

/* A helper for what is about to copy the WAL's pages (a commit, whose
 * automatic checkpoint may follow, or the last connection's close); NULL
 * when the WAL is small or the platform has no such hint. */
static writeback_helper *writeback_helper_start(sqlite_db *db)
{
#if defined(__linux__)
    const char *main_path = sqlite3_db_filename(db->handle, "main");
    struct stat st;
    int wal = main_path && *main_path ? open_wal(db) : -1;
    if (wal < 0 || fstat(wal, &st) != 0 || st.st_size < WRITEBACK_HELPER_WAL_BYTES) {
        if (wal >= 0)
            close(wal);
        return NULL;
    }
    writeback_helper *h = calloc(1, sizeof *h);
    if (!h) {
        close(wal);
        return NULL;
    }
    h->fd[0] = open(main_path, O_RDONLY | O_CLOEXEC);
    h->fd[1] = wal;
    pthread_mutex_init(&h->lock, NULL);
    pthread_cond_init(&h->wake, NULL);
    if (h->fd[0] < 0 || pthread_create(&h->thread, NULL, writeback_helper_main, h) != 0) {
        writeback_helper_release(h);
        return NULL;
    }
    return h;
#else
    (void)db;
    return NULL;
#endif
}

static void writeback_helper_stop(writeback_helper *h)
{
#if defined(__linux__)
    if (!h)
        return;
    pthread_mutex_lock(&h->lock);
    h->stop = 1;
    pthread_cond_signal(&h->wake);
    pthread_mutex_unlock(&h->lock);
    pthread_join(h->thread, NULL);
    writeback_helper_release(h);
#else
    (void)h;
#endif
}

static void db_close(sl__db *db)
{
    writeback_helper *helper = writeback_helper_start((sqlite_db *)db);
    sqlite3_close(H(db));
    writeback_helper_stop(helper);
    if (((sqlite_db *)db)->wal_fd >= 0)
        close(((sqlite_db *)db)->wal_fd);
    free(db);
}

static const char *db_errmsg(sl__db *db)
{
    return H(db) ? sqlite3_errmsg(H(db)) : "out of memory";
}

static sl__db_errkind db_errkind(sl__db *db)
{
    int extended = sqlite3_extended_errcode(H(db));
    switch (extended) {
    case SQLITE_CONSTRAINT_UNIQUE: return SL__DBE_UNIQUE;
    case SQLITE_CONSTRAINT_PRIMARYKEY: return SL__DBE_PRIMARYKEY;
    case SQLITE_CONSTRAINT_FOREIGNKEY: return SL__DBE_FOREIGNKEY;
    case SQLITE_CONSTRAINT_CHECK: return SL__DBE_CHECK;
    case SQLITE_CONSTRAINT_NOTNULL: return SL__DBE_NOTNULL;
    default: break;
    }
    switch (extended & 0xff) {
    case SQLITE_CONSTRAINT: return SL__DBE_CONSTRAINT;
    case SQLITE_READONLY: return SL__DBE_READONLY;
    case SQLITE_FULL: return SL__DBE_FULL;
    case SQLITE_IOERR: return SL__DBE_IOERR;
    case SQLITE_CANTOPEN: return SL__DBE_CANTOPEN;
    case SQLITE_NOTADB:
    case SQLITE_CORRUPT: return SL__DBE_NOTADB;
    case SQLITE_BUSY: return SL__DBE_BUSY;
    default: return SL__DBE_OTHER;
    }
}

static int db_syserr(sl__db *db) { return sqlite3_system_errno(H(db)); }
static int db_readonly(sl__db *db) { return sqlite3_db_readonly(H(db), "main") == 1; }
static int db_in_transaction(sl__db *db) { return !sqlite3_get_autocommit(H(db)); }
static long db_changes(sl__db *db) { return (long)sqlite3_changes(H(db)); }

static int db_exec(sl__db *db, const char *sql)
{
    writeback_helper *helper =
        strcmp(sql, "COMMIT") == 0 ? writeback_helper_start((sqlite_db *)db) : NULL;
    int rc = sqlite3_exec(H(db), sql, NULL, NULL, NULL);
    writeback_helper_stop(helper);
    return rc == SQLITE_OK ? SL__DB_OK : SL__DB_FAIL;
}

static const sl__db_ops sqlite_ops;

#define RETURNING_ID " RETURNING id"

/* The length of sql without its RETURNING clause when it is the insert of
 * one row that gives back its id, "INSERT INTO t (...) VALUES (...) [ON
 * CONFLICT DO NOTHING] RETURNING id"; 0 for any other statement. Such a
 * statement is run without the clause and the new row's rowid is handed
 * back as its one row (none when the insert was turned away): SQLite runs
 * a statement with RETURNING under a statement journal, which outgrows
 * its 64 KiB in memory on 16 KiB pages and then costs two writes to a
 * temporary file for every page the insert touches. Every table of the
 * schema that an insert gives the id of declares it INTEGER PRIMARY KEY,
 * the rowid. */
static size_t rowid_returning(const char *sql)
{
    size_t len = strlen(sql), tail = strlen(RETURNING_ID);
    if (strncmp(sql, "INSERT INTO ", 12) != 0 || len <= tail ||
        strcmp(sql + len - tail, RETURNING_ID) != 0)
        return 0;
    const char *values = strstr(sql, ") VALUES (");
    if (!values || strstr(sql, "SELECT") || strchr(values + 10, ';'))
        return 0;
    for (const char *p = values + 10; *p; p++) /* one row: no "), (" */
        if (*p == ')' && p[1 + (p[1] == ' ')] == ',')
            return 0;
    return len - tail;
}

static int db_prepare(sl__db *db, const char *sql, int flags, sl__stmt **out)
{
    (void)flags; /* SQLite reads rows as they are stepped anyway */
    sqlite_stmt *st = calloc(1, sizeof *st);
    if (!st)
        return SL__DB_FAIL;
    st->base.ops = &sqlite_ops;
    size_t without = rowid_returning(sql);
    st->rowid_returning = without > 0;
    if (sqlite3_prepare_v2(H(db), sql, without ? (int)without : -1, &st->handle, NULL) !=
        SQLITE_OK) {
        free(st);
        return SL__DB_FAIL;
    }
    *out = &st->base;
    return SL__DB_OK;
}

static sqlite_stmt *R(sl__stmt *st) { return (sqlite_stmt *)st; }

/* The insert of rowid_returning: its one row is the new rowid, when the
 * insert added a row. */
static int step_rowid(sqlite_stmt *st)
{
    if (st->state != ROWID_UNSTEPPED) {
        st->state = ROWID_DONE;
        return SL__DB_DONE;
    }
    int rc = sqlite3_step(st->handle);
    if (rc != SQLITE_DONE)
        return SL__DB_FAIL; /* an insert without RETURNING gives no rows */
    sqlite3 *db = sqlite3_db_handle(st->handle);
    if (sqlite3_changes(db) != 1) {
        st->state = ROWID_DONE;
        return SL__DB_DONE;
    }
    st->rowid = sqlite3_last_insert_rowid(db);
    st->state = ROWID_ROW;
    return SL__DB_ROW;
}

static int st_step(sl__stmt *st)
{
    if (R(st)->rowid_returning)
        return step_rowid(R(st));
    int rc = sqlite3_step(S(st));
    return rc == SQLITE_ROW ? SL__DB_ROW : rc == SQLITE_DONE ? SL__DB_DONE : SL__DB_FAIL;
}

static void st_reset(sl__stmt *st)
{
    R(st)->state = ROWID_UNSTEPPED;
    sqlite3_reset(S(st));
}

static void st_finalize(sl__stmt *st)
{
    sqlite3_finalize(S(st));
    free(st);
}

static void bind_int64(sl__stmt *st, int i, long long v) { sqlite3_bind_int64(S(st), i, v); }
static void bind_double(sl__stmt *st, int i, double v) { sqlite3_bind_double(S(st), i, v); }
static void bind_text(sl__stmt *st, int i, const char *text, int len)
{
    sqlite3_bind_text(S(st), i, text, len, SQLITE_TRANSIENT);
}
static void bind_blob(sl__stmt *st, int i, const void *data, size_t bytes)
{
    sqlite3_bind_blob64(S(st), i, data, bytes, SQLITE_TRANSIENT);
}
static void bind_null(sl__stmt *st, int i) { sqlite3_bind_null(S(st), i); }

/* Column c is the rowid handed back by step_rowid. */
static int is_rowid(sl__stmt *st, int c)
{
    return R(st)->rowid_returning && R(st)->state == ROWID_ROW && c == 0;
}

static const char *rowid_text(sl__stmt *st)
{
    snprintf(R(st)->rowid_text, sizeof R(st)->rowid_text, "%lld", (long long)R(st)->rowid);
    return R(st)->rowid_text;
}

static int column_is_null(sl__stmt *st, int c)
{
    return !is_rowid(st, c) && sqlite3_column_type(S(st), c) == SQLITE_NULL;
}
static long long column_int64(sl__stmt *st, int c)
{
    return is_rowid(st, c) ? (long long)R(st)->rowid : sqlite3_column_int64(S(st), c);
}
static double column_double(sl__stmt *st, int c)
{
    return is_rowid(st, c) ? (double)R(st)->rowid : sqlite3_column_double(S(st), c);
}
static const char *column_text(sl__stmt *st, int c)
{
    return is_rowid(st, c) ? rowid_text(st) : (const char *)sqlite3_column_text(S(st), c);
}
static const void *column_blob(sl__stmt *st, int c)
{
    return is_rowid(st, c) ? rowid_text(st) : sqlite3_column_blob(S(st), c);
}
static size_t column_bytes(sl__stmt *st, int c)
{
    return is_rowid(st, c) ? strlen(rowid_text(st)) : (size_t)sqlite3_column_bytes(S(st), c);
}

static const sl__db_ops sqlite_ops = {
    db_close, db_errmsg, db_errkind, db_syserr, db_readonly, db_in_transaction, db_changes,
    db_exec, db_prepare, st_step, st_reset, st_finalize, bind_int64, bind_double, bind_text,
    bind_blob, bind_null, column_is_null, column_int64, column_double, column_text,
    column_blob, column_bytes,
};

int sl__db_sqlite_open(sl__db **out, const char *path)
{
    sqlite_db *db = calloc(1, sizeof *db);
    if (!db)
        return SL__DB_FAIL;
    db->base.ops = &sqlite_ops;
    db->base.kind = SL__DB_SQLITE;
    db->wal_fd = -1;
    *out = &db->base;
    int rc = sqlite3_open_v2(path, &db->handle, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE, NULL);
    if (rc != SQLITE_OK)
        return SL__DB_FAIL;
    sqlite3_extended_result_codes(db->handle, 1);
    return SL__DB_OK;
}

#if defined(__linux__)
/* The WAL file beside the database, opened read-only; -1 when there is
 * none (not yet written, or a database without a file). */
static int open_wal(sqlite_db *db)
{
    const char *main_path = sqlite3_db_filename(db->handle, "main");
    if (!main_path || !*main_path)
        return -1;
    size_t len = strlen(main_path);
    char *path = malloc(len + sizeof "-wal");
    if (!path)
        return -1;
    memcpy(path, main_path, len);
    memcpy(path + len, "-wal", sizeof "-wal");
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    free(path);
    return fd;
}
#endif

void sl__db_sqlite_start_writeback(sl__db *db)
{
#if defined(__linux__)
    if (db->kind != SL__DB_SQLITE)
        return;
    sqlite_db *s = (sqlite_db *)db;
    struct stat st;
    if (s->wal_fd >= 0 && fstat(s->wal_fd, &st) == 0 && st.st_nlink == 0) {
        close(s->wal_fd); /* the last connection's close removed it */
        s->wal_fd = -1;
    }
    if (s->wal_fd < 0)
        s->wal_fd = open_wal(s);
    if (s->wal_fd >= 0)
        (void)sync_file_range(s->wal_fd, 0, 0, SYNC_FILE_RANGE_WRITE); /* a hint only */
#else
    (void)db;
#endif
}

/* The busy timeout is SQLite's alone: the store sets it through this. */
void sl__db_sqlite_busy_timeout(sl__db *db, int ms);
void sl__db_sqlite_busy_timeout(sl__db *db, int ms)
{
    if (db->kind == SL__DB_SQLITE)
        sqlite3_busy_timeout(H(db), ms);
}
