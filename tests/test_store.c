/* SPDX-License-Identifier: MIT
 * Tests of the SQLite store: schema creation and migration bookkeeping, files
 * it must refuse (too new, not a database, read-only), plan revisions, exact
 * round trips of packed sweeps, and the duplicate-device rule.
 */
#include <check.h>
#include <ctype.h>
#include <dirent.h>
#include <float.h>
#include <math.h>
#include <pwd.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/predict.h"
#include "splitlot/store.h"
#include "test_support.h"

#define DEMO_PLAN SL_SOURCE_DIR "/plans/demo.yaml"

static sl_store *open_ok(const char *path)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_status st = sl_store_open(&store, path, diag);
    ck_assert_msg(st == SL_OK, "%s: %s", path, sl_diag_last(diag));
    sl_diag_free(diag);
    return store;
}

/* A single-value query on the store's own connection. */
static char *query_text(sl_store *store, const char *sql)
{
    sqlite3_stmt *st = NULL;
    ck_assert_int_eq(sqlite3_prepare_v2(sl_store_db(store), sql, -1, &st, NULL), SQLITE_OK);
    ck_assert_int_eq(sqlite3_step(st), SQLITE_ROW);
    char *v = strdup((const char *)sqlite3_column_text(st, 0));
    sqlite3_finalize(st);
    return v;
}

static long query_long(sl_store *store, const char *sql)
{
    char *t = query_text(store, sql);
    long v = strtol(t, NULL, 10);
    free(t);
    return v;
}

static void drop_dir(char *dir)
{
    sl_test_rmtree(dir);
    free(dir);
}

/* ---- opening and migrations ---- */

static int count_migrations(void)
{
    DIR *d = opendir(SL_SOURCE_DIR "/db");
    ck_assert_ptr_nonnull(d);
    int n = 0;
    for (struct dirent *e; (e = readdir(d)) != NULL;) {
        size_t len = strlen(e->d_name);
        n += len > 8 && isdigit((unsigned char)e->d_name[0]) && isdigit((unsigned char)e->d_name[1]) &&
             isdigit((unsigned char)e->d_name[2]) && e->d_name[3] == '_' &&
             strcmp(e->d_name + len - 4, ".sql") == 0;
    }
    closedir(d);
    return n;
}

START_TEST(open_creates_schema)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "new.db");
    sl_store *store = open_ok(db);
    /* one version per db/NNN_*.sql migration script */
    ck_assert_int_eq(sl_store_schema_version(), count_migrations());
    ck_assert_int_eq(query_long(store, "PRAGMA user_version"), sl_store_schema_version());
    char *mode = query_text(store, "PRAGMA journal_mode");
    ck_assert_str_eq(mode, "wal");
    free(mode);
    ck_assert_int_eq(query_long(store, "PRAGMA foreign_keys"), 1);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM sqlite_master WHERE type = 'table' "
                                       "AND name IN ('lot', 'plan_revision', 'split', 'wafer', "
                                       "'prediction', 'device', 'sweep', 'import')"), 8);
    /* foreign keys are enforced: a revision of a lot that does not exist */
    ck_assert_int_ne(sqlite3_exec(sl_store_db(store),
                                  "INSERT INTO plan_revision (lot_id, revision, plan_hash, plan_text, "
                                  "plan_name, created_utc) VALUES (42, 1, 'h', 't', 'n', 'now')",
                                  NULL, NULL, NULL), SQLITE_OK);
    sl_store_close(store);
    free(db);
    drop_dir(dir);
}
END_TEST

START_TEST(reopen_does_not_migrate_again)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "t.db"), *copy = sl_test_path(dir, "copy.db");
    sl_store *store = open_ok(db);
    ck_assert_int_eq(sqlite3_exec(sl_store_db(store),
                                  "INSERT INTO lot (name, created_utc) VALUES ('KEEP-1', 'x')",
                                  NULL, NULL, NULL), SQLITE_OK);
    long objects = query_long(store, "SELECT count(*) FROM sqlite_master");
    sl_store_close(store);
    ck_assert_int_eq(sl_test_copy_file(db, copy), 0);
    /* a second migration would fail on CREATE TABLE lot, or drop the row */
    store = open_ok(db);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM sqlite_master"), objects);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM lot WHERE name = 'KEEP-1'"), 1);
    ck_assert_int_eq(query_long(store, "PRAGMA user_version"), sl_store_schema_version());
    sl_store_close(store);
    ck_assert_msg(sl_test_files_equal(db, copy), "reopening wrote to the database");
    free(db);
    free(copy);
    drop_dir(dir);
}
END_TEST

START_TEST(newer_schema_refused)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "future.db");
    sqlite3 *raw = NULL;
    ck_assert_int_eq(sqlite3_open(db, &raw), SQLITE_OK);
    char sql[64];
    snprintf(sql, sizeof sql, "PRAGMA user_version = %d", sl_store_schema_version() + 1);
    ck_assert_int_eq(sqlite3_exec(raw, sql, NULL, NULL, NULL), SQLITE_OK);
    sqlite3_close(raw);
    sl_diag *diag = sl_diag_new();
    sl_store *store = (sl_store *)1;
    ck_assert_int_eq(sl_store_open(&store, db, diag), SL_EDB);
    ck_assert_ptr_null(store);
    const sl_diag_msg *m = sl_diag_get(diag, 0);
    ck_assert_str_eq(m->file, db);
    char expect[128];
    snprintf(expect, sizeof expect, "database schema version %d is newer than this splitlot (%d)",
             sl_store_schema_version() + 1, sl_store_schema_version());
    ck_assert_msg(strstr(m->text, expect) && strstr(m->text, "upgrade splitlot"), "%s", m->text);
    sl_diag_free(diag);

    /* the command line says the same in one line, exit 1 */
    const char *argv[] = { "predict", DEMO_PLAN, "--db", "future.db", NULL };
    sl_run_result r = sl_test_run(dir, NULL, argv);
    ck_assert_int_eq(r.exit_code, 1);
    char line[192];
    snprintf(line, sizeof line, "future.db: error: %s", expect);
    ck_assert_msg(strstr(r.err, line) == r.err, "%s", r.err);
    ck_assert_int_eq(strchr(r.err, '\n')[1], '\0');
    ck_assert_str_eq(r.out, "");
    sl_run_result_free(&r);
    free(db);
    drop_dir(dir);
}
END_TEST

START_TEST(not_a_database_refused)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "notes.db");
    const char *text = "These are lab notes, not a database. They are long enough to fill the\n"
                       "first page header that SQLite looks at when it opens a file.\n";
    ck_assert_int_eq(sl_test_write_file(db, text), 0);
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    ck_assert_int_eq(sl_store_open(&store, db, diag), SL_EDB);
    ck_assert_ptr_null(store);
    const sl_diag_msg *m = sl_diag_get(diag, 0);
    ck_assert_str_eq(m->file, db);
    ck_assert_msg(strstr(m->text, "not a database") != NULL, "%s", m->text);
    sl_diag_free(diag);
    /* and the file is left as it was */
    char *after = sl_test_read_file(db, NULL);
    ck_assert_str_eq(after, text);
    free(after);
    free(db);
    drop_dir(dir);
}
END_TEST

/* Open db read-only as the current user and try a transaction; returns 0
 * when the store refuses it with a read-only message. */
static int readonly_check(const char *db)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    int rc = 10;
    sl_status st = sl_store_open(&store, db, diag);
    if (st == SL_OK)
        st = sl_store_begin(store, diag);
    /* in WAL mode the transaction may start; the first write must fail */
    if (st == SL_OK)
        st = sl_store_record_import(store, 1, "results", "ro.csv", 0, 0, diag);
    if (st == SL_EDB && strstr(sl_diag_last(diag), "read-only"))
        rc = 0;
    else if (st == SL_OK)
        rc = 11;   /* the write went through */
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}

START_TEST(read_only_database)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "ro.db");
    sl_store *store = open_ok(db);
    ck_assert_int_eq(sqlite3_exec(sl_store_db(store),
                                  "INSERT INTO lot (name, created_utc) VALUES ('RO-1', 'x')",
                                  NULL, NULL, NULL), SQLITE_OK);
    sl_store_close(store);
    char *copy = sl_test_path(dir, "copy.db");
    ck_assert_int_eq(sl_test_copy_file(db, copy), 0);
    ck_assert_int_eq(chmod(db, 0444), 0);
    if (geteuid() != 0) {
        ck_assert_int_eq(readonly_check(db), 0);
    } else {
        /* root ignores file modes. The store opens paths, not file: URIs
         * (no SQLITE_OPEN_URI), so mode=ro is not available; instead a child
         * drops to the unprivileged 'nobody' user when it exists, else this
         * part is skipped. */
        struct passwd *pw = getpwnam("nobody");
        if (pw) {
            ck_assert_int_eq(chmod(dir, 0777), 0);
            pid_t pid = fork();
            if (pid == 0) {
                if (setgid(pw->pw_gid) != 0 || setuid(pw->pw_uid) != 0)
                    _exit(20);
                _exit(readonly_check(db));
            }
            int status = 0;
            ck_assert_int_eq(waitpid(pid, &status, 0), pid);
            ck_assert_msg(WIFEXITED(status) && WEXITSTATUS(status) == 0, "child status %d",
                          WIFEXITED(status) ? WEXITSTATUS(status) : -1);
        }
    }
    ck_assert(sl_test_files_equal(db, copy));
    ck_assert_int_eq(chmod(db, 0644), 0);
    free(copy);
    free(db);
    drop_dir(dir);
}
END_TEST

/* ---- plan revisions ---- */

typedef struct {
    sl_plan *plan;
    sl_layout *layout;
    sl_prediction *pred;
    size_t n_pred;
} planned;

static planned plan_text(const char *text)
{
    planned p = { 0 };
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(sl_plan_parse(&p.plan, text, strlen(text), "demo.yaml", diag), SL_OK);
    ck_assert_int_eq(sl_layout_build(&p.layout, p.plan, diag), SL_OK);
    ck_assert_int_eq(sl_predict_plan(&p.pred, &p.n_pred, p.plan, diag), SL_OK);
    sl_diag_free(diag);
    return p;
}

static void planned_free(planned *p)
{
    free(p->pred);
    sl_layout_free(p->layout);
    sl_plan_free(p->plan);
}

static void save(sl_store *store, const planned *p, int expect_revision, int expect_created)
{
    sl_diag *diag = sl_diag_new();
    int revision = -1, created = -1;
    ck_assert_int_eq(sl_store_begin(store, diag), SL_OK);
    ck_assert_int_eq(sl_store_save_plan(store, &revision, &created, p->plan, p->layout, p->pred,
                                        p->n_pred, diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(store, diag), SL_OK);
    ck_assert_int_eq(revision, expect_revision);
    ck_assert_int_eq(created, expect_created);
    sl_diag_free(diag);
}

START_TEST(plan_revisions)
{
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "t.db");
    char *text = sl_test_read_file(DEMO_PLAN, NULL);
    ck_assert_ptr_nonnull(text);
    /* the same plan with another title */
    const char *from = "(invented)";
    char *at = strstr(text, from);
    ck_assert_ptr_nonnull(at);
    size_t cut = (size_t)(at - text);
    char *changed = malloc(strlen(text) + 32);
    snprintf(changed, strlen(text) + 32, "%.*s(invented, second try)%s", (int)cut, text,
             at + strlen(from));

    sl_store *store = open_ok(db);
    planned a = plan_text(text), b = plan_text(changed);
    save(store, &a, 1, 1);
    save(store, &a, 1, 0);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM plan_revision"), 1);
    /* 8 splits x 2 temperatures of the demo plan */
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM prediction"), 16);
    save(store, &b, 2, 1);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM plan_revision"), 2);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM lot"), 1);

    sl_diag *diag = sl_diag_new();
    sl_store_lot lot;
    ck_assert_int_eq(sl_store_find_lot(store, &lot, "DEMO-01", diag), SL_OK);
    ck_assert_int_eq(lot.revision, 2);
    ck_assert_str_eq(lot.plan_text, changed);
    ck_assert_str_eq(lot.plan_name, "demo.yaml");
    ck_assert_str_eq(lot.lot, "DEMO-01");
    ck_assert_int_eq(strlen(lot.created_utc), 20); /* 2026-12-01T22:53:15Z */
    sl_store_lot_clear(&lot);

    /* back to the first text: it is the newest again, as revision 3 */
    save(store, &a, 3, 1);
    ck_assert_int_eq(sl_store_find_lot(store, &lot, "DEMO-01", diag), SL_OK);
    ck_assert_int_eq(lot.revision, 3);
    ck_assert_str_eq(lot.plan_text, text);
    sl_store_lot_clear(&lot);
    save(store, &a, 3, 0);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM plan_revision"), 2);

    ck_assert_int_eq(sl_store_find_lot(store, &lot, "NO-SUCH", diag), SL_ENOTFOUND);
    ck_assert_msg(strstr(sl_diag_last(diag), "known lots: 'DEMO-01'") != NULL, "%s",
                  sl_diag_last(diag));
    sl_diag_free(diag);
    sl_store_close(store);
    planned_free(&a);
    planned_free(&b);
    free(text);
    free(changed);
    free(db);
    drop_dir(dir);
}
END_TEST

/* ---- devices and sweeps ---- */

typedef struct {
    char *dir, *db;
    sl_store *store;
    sl_store_lot lot;
    long wafer_id;
    planned p;
} stored_demo;

static stored_demo demo_store(void)
{
    stored_demo s = { 0 };
    s.dir = sl_test_tmpdir();
    s.db = sl_test_path(s.dir, "t.db");
    s.store = open_ok(s.db);
    char *text = sl_test_read_file(DEMO_PLAN, NULL);
    s.p = plan_text(text);
    free(text);
    save(s.store, &s.p, 1, 1);
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(sl_store_find_lot(s.store, &s.lot, "DEMO-01", diag), SL_OK);
    ck_assert_int_eq(sl_store_wafer_id(s.store, &s.wafer_id, s.lot.revision_id, "W01"), SL_OK);
    ck_assert_int_eq(sl_store_wafer_id(s.store, &(long){ 0 }, s.lot.revision_id, "W99"),
                     SL_ENOTFOUND);
    sl_diag_free(diag);
    return s;
}

static void demo_store_free(stored_demo *s)
{
    sl_store_lot_clear(&s->lot);
    sl_store_close(s->store);
    planned_free(&s->p);
    free(s->db);
    drop_dir(s->dir);
}

static sl_store_device device_named(long wafer_id, const char *name)
{
    sl_store_device d = { .wafer_id = wafer_id, .name = name, .die_x = 2, .die_y = 3,
                          .source = "sweeps", .fit_class = "ok", .temperature_K = 300.0,
                          .cnp_V = 1.25, .cnp_sigma_V = NAN, .mobility_cm2_per_Vs = 2100.0,
                          .mobility_sigma_cm2_per_Vs = NAN, .n0_per_cm2 = 1.5e11,
                          .n0_sigma_per_cm2 = NAN, .r_contact_ohm = 0.0,
                          .r_contact_sigma_ohm = NAN, .rel_rms = NAN, .r_squared = NAN };
    return d;
}

START_TEST(sweep_round_trip_exact)
{
    stored_demo s = demo_store();
    /* awkward doubles: signed zero, subnormals, extremes, non-terminating binary */
    const double vg[] = { -0.0, 0.0, 4.9406564584124654e-324, -2.2250738585072009e-308, DBL_MIN,
                          DBL_MAX, -DBL_MAX, 0.1, -40.0, 1e-300 };
    const double r[] = { 1e308, 5e-324, 1.0 / 3.0, 123456789.123456789, DBL_EPSILON, -0.0,
                         3.0e10, 7.0, 2.5e-310, 1e22 };
    const size_t n = sizeof vg / sizeof vg[0];
    sl_diag *diag = sl_diag_new();
    sl_store_device d = device_named(s.wafer_id, "D007");
    d.vg_V = vg;
    d.r_ohm = r;
    d.n_points = n;
    long id = 0;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_insert_device(s.store, &id, s.lot.lot_id, &d, diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    ck_assert_int_gt(id, 0);

    double *vg2 = NULL, *r2 = NULL;
    size_t n2 = 0;
    ck_assert_int_eq(sl_store_load_sweep(s.store, &vg2, &r2, &n2, id, diag), SL_OK);
    ck_assert_uint_eq(n2, n);
    ck_assert_int_eq(memcmp(vg, vg2, sizeof vg), 0);
    ck_assert_int_eq(memcmp(r, r2, sizeof r), 0);
    ck_assert(signbit(vg2[0]) && !signbit(vg2[1]));
    free(vg2);
    free(r2);
    /* the blob is little-endian whatever the host: byte 0..7 of point 0 is
     * -0.0 = 0x8000000000000000, so its last byte is 0x80 */
    sqlite3_stmt *st = NULL;
    ck_assert_int_eq(sqlite3_prepare_v2(sl_store_db(s.store),
                                        "SELECT points FROM sweep WHERE device_id = ?1", -1, &st,
                                        NULL), SQLITE_OK);
    sqlite3_bind_int64(st, 1, id);
    ck_assert_int_eq(sqlite3_step(st), SQLITE_ROW);
    ck_assert_int_eq(sqlite3_column_bytes(st, 0), (int)(16 * n));
    const unsigned char *blob = sqlite3_column_blob(st, 0);
    ck_assert_int_eq(blob[7], 0x80);
    ck_assert_int_eq(blob[0], 0x00);
    sqlite3_finalize(st);

    /* NaN numbers come back as NaN (stored NULL); the row as inserted */
    sl_store_device_row *rows = NULL;
    size_t count = 0;
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_uint_eq(count, 1);
    ck_assert_str_eq(rows[0].wafer, "W01");
    ck_assert_str_eq(rows[0].name, "D007");
    ck_assert_str_eq(rows[0].fit_class, "ok");
    ck_assert_str_eq(rows[0].source, "sweeps");
    ck_assert_int_eq(rows[0].die_x, 2);
    ck_assert_int_eq(rows[0].die_y, 3);
    ck_assert_int_eq(rows[0].n_points, (long)n);
    ck_assert_double_eq(rows[0].cnp_V, 1.25);
    ck_assert_double_eq(rows[0].r_contact_ohm, 0.0);
    ck_assert(isnan(rows[0].cnp_sigma_V) && isnan(rows[0].rel_rms) && isnan(rows[0].r_squared));
    free(rows);
    ck_assert_int_eq(sl_store_load_sweep(s.store, &vg2, &r2, &n2, id + 1000, diag), SL_ENOTFOUND);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

START_TEST(duplicate_device_is_input_error)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    sl_store_device d = device_named(s.wafer_id, "D001");
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_OK);
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_EINPUT);
    ck_assert_msg(strstr(sl_diag_last(diag), "duplicate device 'D001'") != NULL, "%s",
                  sl_diag_last(diag));
    /* the same name on another wafer is another device */
    long w2 = 0;
    ck_assert_int_eq(sl_store_wafer_id(s.store, &w2, s.lot.revision_id, "W02"), SL_OK);
    d.wafer_id = w2;
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    long count = 0;
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 2);

    /* a new plan revision has new wafer rows, but W01 is still W01 */
    char *text = sl_test_read_file(DEMO_PLAN, NULL);
    memcpy(strstr(text, "(invented)"), "(Invented)", 10);
    planned b = plan_text(text);
    save(s.store, &b, 2, 1);
    sl_store_lot lot2;
    long w1_rev2 = 0;
    ck_assert_int_eq(sl_store_find_lot(s.store, &lot2, "DEMO-01", diag), SL_OK);
    ck_assert_int_eq(sl_store_wafer_id(s.store, &w1_rev2, lot2.revision_id, "W01"), SL_OK);
    ck_assert_int_ne(w1_rev2, s.wafer_id);
    d.wafer_id = w1_rev2;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_EINPUT);
    d.name = "D005";
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_OK);
    sl_store_rollback(s.store);
    d.name = "D001";
    sl_store_lot_clear(&lot2);
    planned_free(&b);
    free(text);
    /* rolled back inserts leave nothing */
    d.name = "D002";
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_insert_device(s.store, NULL, s.lot.lot_id, &d, diag), SL_OK);
    sl_store_rollback(s.store);
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 2);
    /* delete_measurements removes devices and their sweeps */
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_delete_measurements(s.store, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 0);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM sweep"), 0);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

START_TEST(staged_points_in_order)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    const double vg1[] = { 1.0, 2.0, 3.0 }, r1[] = { 10.0, 20.0, 30.0 };
    const double vg2[] = { -1.0, -0.0 }, r2[] = { 5e-324, 1e300 };
    ck_assert_int_eq(sl_store_stage_points(s.store, 7, vg1, r1, 3, diag), SL_OK);
    ck_assert_int_eq(sl_store_stage_points(s.store, 8, vg2, r2, 2, diag), SL_OK);
    ck_assert_int_eq(sl_store_stage_points(s.store, 7, vg2, r2, 2, diag), SL_OK);
    double *vg = NULL, *r = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_store_staged_points(s.store, &vg, &r, &n, 7, diag), SL_OK);
    ck_assert_uint_eq(n, 5);
    const double want_vg[] = { 1.0, 2.0, 3.0, -1.0, -0.0 }, want_r[] = { 10.0, 20.0, 30.0, 5e-324, 1e300 };
    ck_assert_int_eq(memcmp(vg, want_vg, sizeof want_vg), 0);
    ck_assert_int_eq(memcmp(r, want_r, sizeof want_r), 0);
    free(vg);
    free(r);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

static Suite *store_suite(void)
{
    Suite *s = suite_create("store");
    TCase *tc = tcase_create("store");
    tcase_set_timeout(tc, 300);
    tcase_add_test(tc, open_creates_schema);
    tcase_add_test(tc, reopen_does_not_migrate_again);
    tcase_add_test(tc, newer_schema_refused);
    tcase_add_test(tc, not_a_database_refused);
    tcase_add_test(tc, read_only_database);
    tcase_add_test(tc, plan_revisions);
    tcase_add_test(tc, sweep_round_trip_exact);
    tcase_add_test(tc, duplicate_device_is_input_error);
    tcase_add_test(tc, staged_points_in_order);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(store_suite()); }
