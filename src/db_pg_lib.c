/* SPDX-License-Identifier: MIT
 * Loading libpq at the first PostgreSQL database opened (see db_pg_lib.h):
 * dlopen of the library by its stable name, then each function the driver
 * uses looked up by name into sl__pq, once for the process.
 */
#define SL_DB_PG_LIB_INTERNAL 1
#include "db_pg_lib.h"

#include <dlfcn.h>
#include <pthread.h>
#include <stdio.h>
#include <string.h>

sl__pq_api sl__pq;

#define ENTRY(symbol, member) { symbol, offsetof(sl__pq_api, member) }

static const struct {
    const char *symbol;
    size_t offset;
} entries[] = {
    ENTRY("PQclear", clear),
    ENTRY("PQcmdTuples", cmd_tuples),
    ENTRY("PQconnectdb", connectdb),
    ENTRY("PQconnectionNeedsPassword", connection_needs_password),
    ENTRY("PQerrorMessage", error_message),
    ENTRY("PQexec", exec),
    ENTRY("PQexecParams", exec_params),
    ENTRY("PQexecPrepared", exec_prepared),
    ENTRY("PQfinish", finish),
    ENTRY("PQftype", ftype),
    ENTRY("PQgetResult", get_result),
    ENTRY("PQgetisnull", getisnull),
    ENTRY("PQgetlength", getlength),
    ENTRY("PQgetvalue", getvalue),
    ENTRY("PQnfields", nfields),
    ENTRY("PQntuples", ntuples),
    ENTRY("PQprepare", prepare),
    ENTRY("PQputCopyData", put_copy_data),
    ENTRY("PQputCopyEnd", put_copy_end),
    ENTRY("PQresultErrorField", result_error_field),
    ENTRY("PQresultStatus", result_status),
    ENTRY("PQsetNoticeProcessor", set_notice_processor),
    ENTRY("PQstatus", status),
    ENTRY("PQtransactionStatus", transaction_status),
};

/* libpq's run-time name since PostgreSQL 8.2; the development link last. */
static const char *const library_names[] = { "libpq.so.5", "libpq.so" };

static pthread_once_t once = PTHREAD_ONCE_INIT;
static char load_error[256];   /* "" once loaded */

static void load(void)
{
    void *lib = NULL;
    char first_why[160] = "not found";
    for (size_t i = 0; !lib && i < sizeof library_names / sizeof *library_names; i++) {
        lib = dlopen(library_names[i], RTLD_NOW | RTLD_LOCAL);
        const char *why = lib ? NULL : dlerror();
        if (i == 0 && why)
            snprintf(first_why, sizeof first_why, "%s", why);
    }
    if (!lib) {
        snprintf(load_error, sizeof load_error,
                 "PostgreSQL needs the client library libpq, which cannot be loaded (%s); "
                 "install it (Debian: libpq5)", first_why);
        return;
    }
    sl__pq_api api;
    for (size_t i = 0; i < sizeof entries / sizeof *entries; i++) {
        void *fn = dlsym(lib, entries[i].symbol);
        if (!fn) {
            snprintf(load_error, sizeof load_error,
                     "the PostgreSQL client library libpq has no %s: too old a libpq",
                     entries[i].symbol);
            dlclose(lib);
            return;
        }
        /* POSIX: a function's address travels as void *; copied, not cast */
        memcpy((char *)&api + entries[i].offset, &fn, sizeof fn);
    }
    sl__pq = api; /* kept loaded for the life of the process */
}

int sl__pq_load(char *why, size_t size)
{
    pthread_once(&once, load);
    if (!load_error[0])
        return 0;
    snprintf(why, size, "%s", load_error);
    return -1;
}
