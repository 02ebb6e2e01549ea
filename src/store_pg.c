/* SPDX-License-Identifier: MIT
 * The store on a PostgreSQL server: migrations kept in a table of versions
 * (db/pg/NNN_*.sql, compiled in), applied by one client at a time under an
 * advisory lock, and the per-lot advisory lock that lets imports of
 * different lots run at once while two of one lot take turns.
 */
#include <stdio.h>

#include "store_internal.h"

extern const char *const sl__pg_schema_migrations[];
extern const size_t sl__pg_schema_migration_count;

/* db/pg/004_*.sql makes a server database at version 4 in one step. */
#define SL_PG_FIRST_VERSION 4
/* Advisory locks hold for the whole server, whatever the schema: their
 * first key is a hash of what they guard and of the schema splitlot's tables
 * are in (so two splitlot databases as two schemas of one server never wait
 * for each other), the second a lot's id, or 0 for a migration. */
#define SL_PG_LOT_LOCK "hashtext('splitlot lot ' || current_schema())"
#define SL_PG_MIGRATION_LOCK "hashtext('splitlot migration ' || current_schema())"

static sl_status read_version(sl_store *store, int *version, sl_diag *diag)
{
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
                                   "SELECT coalesce(max(version), 0) FROM splitlot_schema", diag);
    if (s != SL_OK)
        return s;
    if (sl__db_step(st) == SL__DB_ROW)
        *version = (int)sl__db_column_int64(st, 0);
    else
        s = sl__store_db_error(store, diag, "read the schema version");
    sl__db_finalize(st);
    return s;
}

static sl_status record_version(sl_store *store, int version, sl_diag *diag)
{
    char now[32];
    sl__store_now_utc(now);
    sl__stmt *st = NULL;
    sl_status s = sl__store_prepare(store, &st,
        "INSERT INTO splitlot_schema (version, applied_utc) VALUES (?1, ?2)", diag);
    if (s != SL_OK)
        return s;
    sl__db_bind_int64(st, 1, version);
    sl__db_bind_text(st, 2, now, -1);
    return sl__store_step_once(store, st, diag, "record the schema version");
}

static sl_status migrate_locked(sl_store *store, sl_diag *diag)
{
    int target = SL_PG_FIRST_VERSION - 1 + (int)sl__pg_schema_migration_count, version = 0;
    if (target != sl_store_schema_version()) {
        sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0,
                    "this splitlot was built without the PostgreSQL form of schema version %d",
                    sl_store_schema_version());
        return SL_EDB;
    }
    sl_status s = sl__store_exec(store, "SELECT pg_advisory_xact_lock(" SL_PG_MIGRATION_LOCK ", 0)",
                                diag, "wait for another client's schema migration");
    if (s == SL_OK)
        s = sl__store_exec(store, "CREATE TABLE IF NOT EXISTS splitlot_schema (version integer "
                                 "PRIMARY KEY, applied_utc text NOT NULL)",
                          diag, "create the table of schema versions");
    if (s == SL_OK)
        s = read_version(store, &version, diag);
    if (s == SL_OK && version > target)
        return sl__store_refuse_newer(store, version, diag);
    if (s == SL_OK && version > 0 && version < SL_PG_FIRST_VERSION) {
        sl_diag_add(diag, SL_SEV_ERROR, store->path, 0, 0,
                    "database schema version %d on the server predates splitlot's PostgreSQL "
                    "support; copy the lots into a new database", version);
        return SL_EDB;
    }
    int from = version ? version + 1 : SL_PG_FIRST_VERSION;
    for (int v = from; s == SL_OK && v <= target; v++) {
        s = sl__store_exec(store, sl__pg_schema_migrations[v - SL_PG_FIRST_VERSION], diag,
                          "migrate the schema");
        if (s == SL_OK)
            s = record_version(store, v, diag);
    }
    return s;
}

sl_status sl__store_pg_setup(sl_store *store, sl_diag *diag)
{
    sl_status s = sl__store_exec(store, "BEGIN", diag, "start a schema migration");
    if (s == SL_OK)
        s = migrate_locked(store, diag);
    if (s == SL_OK)
        s = sl__store_exec(store, "COMMIT", diag, "commit a schema migration");
    if (s != SL_OK)
        sl_store_rollback(store);
    return s;
}

sl_status sl__store_lock_lot(sl_store *store, long lot_id, sl_diag *diag)
{
    if (!sl__store_is_pg(store))
        return SL_OK; /* SQLite's BEGIN IMMEDIATE has the whole file already */
    char sql[128];
    snprintf(sql, sizeof sql, "SELECT pg_advisory_xact_lock(" SL_PG_LOT_LOCK ", %ld)", lot_id);
    return sl__store_exec(store, sql, diag, "wait for another import of the lot");
}
