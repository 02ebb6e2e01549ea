/* SPDX-License-Identifier: MIT
 * libpq, the PostgreSQL client library, loaded when the first PostgreSQL
 * database is opened rather than when the program starts: libpq brings some
 * twenty libraries of its own (TLS, Kerberos, LDAP), whose loading cost
 * every command a few milliseconds though most never use a server. Only
 * db_pg.c calls libpq; it includes this header after <libpq-fe.h>, and the
 * PQ... names it uses then go through the table loaded here. Private to the
 * store's database layer.
 */
#ifndef SL_DB_PG_LIB_H
#define SL_DB_PG_LIB_H

#include <stddef.h>

#include <libpq-fe.h>

/* The libpq functions the driver calls, with libpq's signatures. */
typedef struct {
    void (*clear)(PGresult *res);
    char *(*cmd_tuples)(PGresult *res);
    PGconn *(*connectdb)(const char *conninfo);
    int (*connection_needs_password)(const PGconn *conn);
    char *(*error_message)(const PGconn *conn);
    PGresult *(*exec)(PGconn *conn, const char *query);
    PGresult *(*exec_params)(PGconn *conn, const char *command, int n_params,
                             const Oid *param_types, const char *const *param_values,
                             const int *param_lengths, const int *param_formats,
                             int result_format);
    PGresult *(*exec_prepared)(PGconn *conn, const char *stmt_name, int n_params,
                               const char *const *param_values, const int *param_lengths,
                               const int *param_formats, int result_format);
    void (*finish)(PGconn *conn);
    Oid (*ftype)(const PGresult *res, int field_num);
    PGresult *(*get_result)(PGconn *conn);
    int (*getisnull)(const PGresult *res, int tup_num, int field_num);
    int (*getlength)(const PGresult *res, int tup_num, int field_num);
    char *(*getvalue)(const PGresult *res, int tup_num, int field_num);
    int (*nfields)(const PGresult *res);
    int (*ntuples)(const PGresult *res);
    PGresult *(*prepare)(PGconn *conn, const char *stmt_name, const char *query, int n_params,
                         const Oid *param_types);
    int (*put_copy_data)(PGconn *conn, const char *buffer, int nbytes);
    int (*put_copy_end)(PGconn *conn, const char *errormsg);
    char *(*result_error_field)(const PGresult *res, int fieldcode);
    ExecStatusType (*result_status)(const PGresult *res);
    PQnoticeProcessor (*set_notice_processor)(PGconn *conn, PQnoticeProcessor proc, void *arg);
    ConnStatusType (*status)(const PGconn *conn);
    PGTransactionStatusType (*transaction_status)(const PGconn *conn);
} sl__pq_api;

/* The table, filled by the first successful sl__pq_load. */
extern sl__pq_api sl__pq;

/* Load libpq once (thread-safe); 0 when every function was found, else -1
 * with why, a sentence for the user, in why[size]. */
int sl__pq_load(char *why, size_t size);

#ifndef SL_DB_PG_LIB_INTERNAL
#define PQclear (*sl__pq.clear)
#define PQcmdTuples (*sl__pq.cmd_tuples)
#define PQconnectdb (*sl__pq.connectdb)
#define PQconnectionNeedsPassword (*sl__pq.connection_needs_password)
#define PQerrorMessage (*sl__pq.error_message)
#define PQexec (*sl__pq.exec)
#define PQexecParams (*sl__pq.exec_params)
#define PQexecPrepared (*sl__pq.exec_prepared)
#define PQfinish (*sl__pq.finish)
#define PQftype (*sl__pq.ftype)
#define PQgetResult (*sl__pq.get_result)
#define PQgetisnull (*sl__pq.getisnull)
#define PQgetlength (*sl__pq.getlength)
#define PQgetvalue (*sl__pq.getvalue)
#define PQnfields (*sl__pq.nfields)
#define PQntuples (*sl__pq.ntuples)
#define PQprepare (*sl__pq.prepare)
#define PQputCopyData (*sl__pq.put_copy_data)
#define PQputCopyEnd (*sl__pq.put_copy_end)
#define PQresultErrorField (*sl__pq.result_error_field)
#define PQresultStatus (*sl__pq.result_status)
#define PQsetNoticeProcessor (*sl__pq.set_notice_processor)
#define PQstatus (*sl__pq.status)
#define PQtransactionStatus (*sl__pq.transaction_status)
#endif

#endif
