/* SPDX-License-Identifier: MIT
 * Tests of the SQLite store: schema creation and migration bookkeeping, files
 * it must refuse (too new, not a database, read-only), plan revisions, exact
 * round trips of packed sweeps (the compact blob coded and decoded directly,
 * old raw blobs, damaged ones), the duplicate-device rule, and the scratch
 * space of an analysis.
 */
#include <check.h>
#include <ctype.h>
#include <dirent.h>
#include <float.h>
#include <math.h>
#include <pwd.h>
#include <sqlite3.h>

#include "store_internal.h"
#include <stdint.h>
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
#include "sha256.h"
#include "store_internal.h"
#include "test_support.h"

#define DEMO_PLAN SL_SOURCE_DIR "/plans/demo.yaml"

static sl_store *open_ok(const char *path)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_status st = sl_test_store_open(&store, path, diag);
    ck_assert_msg(st == SL_OK, "%s: %s", path, sl_diag_last(diag));
    sl_diag_free(diag);
    return store;
}

/* A single-value query on the store's own connection. */
static char *query_text(sl_store *store, const char *sql)
{
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(store->db, sql, 0, &st), SL__DB_OK);
    ck_assert_int_eq(sl__db_step(st), SL__DB_ROW);
    char *v = strdup((const char *)sl__db_column_text(st, 0));
    sl__db_finalize(st);
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
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
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
                                       "'prediction', 'device', 'sweep', 'measurement_run', "
                                       "'measurement', 'wafer_load')"), 10);
    /* foreign keys are enforced: a revision of a lot that does not exist */
    ck_assert_int_ne(sl__db_exec(store->db,
                                  "INSERT INTO plan_revision (lot_id, revision, plan_hash, plan_text, "
                                  "plan_name, created_utc) VALUES (42, 1, 'h', 't', 'n', 'now')"), SL__DB_OK);
    sl_store_close(store);
    free(db);
    drop_dir(dir);
}
END_TEST

START_TEST(reopen_does_not_migrate_again)
{
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "t.db"), *copy = sl_test_path(dir, "copy.db");
    sl_store *store = open_ok(db);
    ck_assert_int_eq(sl__db_exec(store->db,
                                  "INSERT INTO lot (name, created_utc) VALUES ('KEEP-1', 'x')"), SL__DB_OK);
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
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
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
    ck_assert_int_eq(sl_test_store_open(&store, db, diag), SL_EDB);
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
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "notes.db");
    const char *text = "These are lab notes, not a database. They are long enough to fill the\n"
                       "first page header that SQLite looks at when it opens a file.\n";
    ck_assert_int_eq(sl_test_write_file(db, text), 0);
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    ck_assert_int_eq(sl_test_store_open(&store, db, diag), SL_EDB);
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
    sl_status st = sl_test_store_open(&store, db, diag);
    if (st == SL_OK)
        st = sl_store_begin(store, diag);
    /* in WAL mode the transaction may start; the first write must fail */
    if (st == SL_OK)
        st = sl_store_add_run(store, &(long){ 0 }, 1, 1, "final", 300.0, "results", "ro.csv", diag);
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
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "ro.db");
    sl_store *store = open_ok(db);
    ck_assert_int_eq(sl__db_exec(store->db,
                                  "INSERT INTO lot (name, created_utc) VALUES ('RO-1', 'x')"), SL__DB_OK);
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
    long run_id;                 /* a run of the lot: step final, 300 K */
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
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_add_run(s.store, &s.run_id, s.lot.lot_id, s.lot.revision_id, "final",
                                      300.0, "sweeps", "demo.csv", diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
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

static sl_store_device device_named(const char *wafer, const char *name)
{
    sl_store_device d;
    sl_store_device_init(&d);
    d.wafer = wafer;
    d.name = name;
    d.die_x = 2;
    d.die_y = 3;
    d.source = "sweeps";
    d.fit_class = "ok";
    d.cnp_V = 1.25;
    d.mobility_cm2_per_Vs = 2100.0;
    d.n0_per_cm2 = 1.5e11;
    d.r_contact_ohm = 0.0;
    return d;
}

/* Insert a measurement that must be added; its id. */
static long insert_added(sl_store *store, long lot_id, long run_id, const sl_store_device *d)
{
    sl_diag *diag = sl_diag_new();
    sl_store_insert ins;
    ck_assert_int_eq(sl_store_insert_measurement(store, &ins, lot_id, run_id, d, diag), SL_OK);
    ck_assert_int_eq(ins.outcome, SL_STORE_ADDED);
    sl_diag_free(diag);
    return ins.measurement_id;
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
    sl_store_device d = device_named("W01", "D007");
    d.fit_model = "two-mobility";
    d.electron_mobility_cm2_per_Vs = 2500.0;
    d.hole_mobility_cm2_per_Vs = 1800.0;
    d.hysteresis_V = 0.25;
    d.vg_V = vg;
    d.r_ohm = r;
    d.n_points = n;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    long id = insert_added(s.store, s.lot.lot_id, s.run_id, &d);
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
    /* none of these columns is a short decimal: the compact blob (format 1)
     * keeps both raw (mode 0), 1 + 2 * (1 + 8 n) bytes, and its doubles are
     * little-endian whatever the host: point 0's vg is -0.0 =
     * 0x8000000000000000, so the last of its bytes 2..9 is 0x80 */
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(s.store->db,
                                        "SELECT points FROM sweep WHERE measurement_id = ?1", 0, &st), SL__DB_OK);
    sl__db_bind_int64(st, 1, id);
    ck_assert_int_eq(sl__db_step(st), SL__DB_ROW);
    ck_assert_int_eq((long)sl__db_column_bytes(st, 0), (long)(1 + 2 * (1 + 8 * n)));
    const unsigned char *blob = sl__db_column_blob(st, 0);
    ck_assert_int_eq(blob[0], 1);
    ck_assert_int_eq(blob[1], 0);
    ck_assert_int_eq(blob[2], 0x00);
    ck_assert_int_eq(blob[9], 0x80);
    ck_assert_int_eq(blob[2 + 8 * n], 0); /* r's mode */
    sl__db_finalize(st);

    /* NaN numbers come back as NaN (stored NULL); the row as inserted */
    sl_store_device_row *rows = NULL;
    size_t count = 0;
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &count, s.lot.lot_id, "final", 300.0,
                                           diag), SL_OK);
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
    ck_assert_str_eq(rows[0].fit_model, "two-mobility");
    ck_assert(rows[0].electron_mobility_cm2_per_Vs == 2500.0 &&
              rows[0].hole_mobility_cm2_per_Vs == 1800.0 && rows[0].hysteresis_V == 0.25);
    ck_assert(isnan(rows[0].channel_length_um) && rows[0].measurements == 1);
    free(rows);
    ck_assert_int_eq(sl_store_load_sweep(s.store, &vg2, &r2, &n2, id + 1000, diag), SL_ENOTFOUND);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* A device keeps every measurement: the same device twice in one run is
 * told apart from a re-probe in a later run (which wins for the view, the
 * earlier staying stored), from a device at another die and from the same
 * name on another wafer; a later plan revision's W01 is the same wafer. */
START_TEST(measurements_reprobes_and_identity)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    sl_store_device d = device_named("W01", "D001");
    sl_store_insert ins;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s.store, s.lot.lot_id, diag), SL_OK);
    long first = insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    d.cnp_V = 9.0;
    ck_assert_int_eq(sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, s.run_id, &d, diag),
                     SL_OK);
    ck_assert_int_eq(ins.outcome, SL_STORE_IN_RUN);
    ck_assert_int_eq(ins.measurement_id, first);
    d.die_x = 4;
    ck_assert_int_eq(sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, s.run_id, &d, diag),
                     SL_OK);
    ck_assert_int_eq(ins.outcome, SL_STORE_DIE_DIFFERS);
    ck_assert(ins.die_x == 2 && ins.die_y == 3 && ins.run_id == s.run_id);
    d.die_x = 2;
    d.wafer = "W02"; /* the same name on another wafer is another device */
    insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    long count = 0;
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 2);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 2);

    /* a new plan revision has new wafer rows, but W01 is still W01: a
     * re-probe in a later run of the same step and temperature wins, the
     * first measurement stays */
    char *text = sl_test_read_file(DEMO_PLAN, NULL);
    memcpy(strstr(text, "(invented)"), "(Invented)", 10);
    planned b = plan_text(text);
    save(s.store, &b, 2, 1);
    long run2 = 0, run77 = 0;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_add_run(s.store, &run2, s.lot.lot_id, s.lot.revision_id, "final",
                                      300.0, "results", "again.csv", diag), SL_OK);
    ck_assert_int_eq(sl_store_add_run(s.store, &run77, s.lot.lot_id, s.lot.revision_id, "final",
                                      77.0, "results", "cold.csv", diag), SL_OK);
    d.wafer = "W01";
    d.cnp_V = 3.5;
    long second = insert_added(s.store, s.lot.lot_id, run2, &d);
    d.cnp_V = 7.5;
    insert_added(s.store, s.lot.lot_id, run77, &d);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 2);
    sl_store_device_row *rows = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &n, s.lot.lot_id, "final", 300.0, diag),
                     SL_OK);
    ck_assert_uint_eq(n, 2);
    ck_assert(strcmp(rows[0].wafer, "W01") == 0 && rows[0].id == second);
    ck_assert(rows[0].cnp_V == 3.5 && rows[0].measurements == 2 && rows[0].run_id == run2);
    ck_assert(strcmp(rows[1].wafer, "W02") == 0 && rows[1].measurements == 1);
    free(rows);
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &n, s.lot.lot_id, "final", 77.0, diag),
                     SL_OK);
    ck_assert(n == 1 && rows[0].cnp_V == 7.5 && rows[0].temperature_K == 77.0);
    free(rows);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement_view WHERE current"), 3);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 4);
    /* runs listed oldest first; a finished run counts its devices, an empty one goes */
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    long run_empty = 0;
    ck_assert_int_eq(sl_store_finish_run(s.store, run2, 1, 1, NULL, diag), SL_OK);
    ck_assert_int_eq(sl_store_add_run(s.store, &run_empty, s.lot.lot_id, s.lot.revision_id,
                                      "final", 300.0, "results", "none.csv", diag), SL_OK);
    ck_assert_int_eq(sl_store_finish_run(s.store, run_empty, 0, 0, NULL, diag), SL_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    sl_store_run *runs = NULL;
    ck_assert_int_eq(sl_store_list_runs(s.store, &runs, &n, s.lot.lot_id, diag), SL_OK);
    ck_assert_uint_eq(n, 3);
    ck_assert(runs[0].id == s.run_id && runs[1].id == run2 && runs[2].id == run77);
    ck_assert(runs[1].devices == 1 && runs[1].revision == 1 && runs[2].temperature_K == 77.0);
    ck_assert_str_eq(runs[1].source_name, "again.csv");
    sl_store_runs_free(runs, n);
    planned_free(&b);
    free(text);
    /* rolled back inserts leave nothing */
    d.name = "D002";
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    sl_store_rollback(s.store);
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_OK);
    ck_assert_int_eq(count, 2);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
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

/* ---- the sweep blob ---- */

static uint64_t next_random(uint64_t *state) /* splitmix64 */
{
    uint64_t z = (*state += 0x9e3779b97f4a7c15u);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9u;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebu;
    return z ^ (z >> 31);
}

static long long random_below(uint64_t *state, long long n)
{
    return (long long)(next_random(state) % (uint64_t)n);
}

/* What a correct strtod makes of the text m e-k: a CSV cell's double. */
static double decimal(long long m, int k)
{
    char text[48];
    snprintf(text, sizeof text, "%llde-%d", m, k);
    return strtod(text, NULL);
}

/* A resistance as a CSV written with %.6g holds it. */
static double six_digits(double r_ohm)
{
    char text[32];
    snprintf(text, sizeof text, "%.6g", r_ohm);
    return strtod(text, NULL);
}

typedef enum { EVEN_STEPS, UNEVEN_STEPS, MIXED_DECIMALS, RESISTANCES, ANY_BITS, N_KINDS } column_kind;

/* Decimals of 1 to 17 digits, 0 to 25 after the point: some beyond 2^53 or
 * 10^22, which must stay raw. */
static double mixed_decimal(uint64_t *rng)
{
    long long m = 1;
    for (long long digits = 1 + random_below(rng, 17); digits > 0; digits--)
        m = 10 * m + random_below(rng, 10);
    return decimal(random_below(rng, 2) ? -m : m, (int)random_below(rng, 26));
}

static double any_bits(uint64_t *rng)
{
    uint64_t bits = next_random(rng);
    double v;
    memcpy(&v, &bits, sizeof v);
    return v;
}

static void fill_column(double *v, size_t n, column_kind kind, uint64_t *rng)
{
    int k = (int)random_below(rng, 7);
    long long m = random_below(rng, 2000001) - 1000000, step = random_below(rng, 2001) - 1000;
    double decade = pow(10.0, (double)random_below(rng, 6));
    for (size_t i = 0; i < n; i++) {
        if (kind == EVEN_STEPS)
            v[i] = decimal(m + (long long)i * step, k);
        else if (kind == UNEVEN_STEPS)
            v[i] = decimal(m += random_below(rng, 2001) - 1000, k);
        else if (kind == MIXED_DECIMALS)
            v[i] = mixed_decimal(rng);
        else if (kind == RESISTANCES)
            v[i] = six_digits(decade * (1.0 + 9.0 * (double)random_below(rng, 1000000) / 1e6));
        else
            v[i] = any_bits(rng);
    }
}

/* Values no decimal column can hold, or only at its limits. */
static void sprinkle_specials(double *v, size_t n, uint64_t *rng)
{
    static const double special[] = { -0.0, NAN, -NAN, INFINITY, -INFINITY, 5e-324,
                                      -2.2250738585072009e-308, DBL_MIN, DBL_MAX, 1e300,
                                      1e-300, 0.1 + 0.2, 1e22, 1e-22 };
    const size_t n_special = sizeof special / sizeof special[0];
    for (long long hits = 1 + random_below(rng, 3); hits > 0; hits--)
        v[random_below(rng, (long long)n)] = special[random_below(rng, (long long)n_special)];
}

/* Pack (the resistances over drain_bias_V, or NaN), check the length
 * rules, unpack, compare bits; returns the length. */
static size_t round_trip_over(const double *vg, const double *r, size_t n, double drain_bias_V)
{
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, n, drain_bias_V, &bytes);
    ck_assert_ptr_nonnull(blob);
    ck_assert_uint_ne(bytes % 16, 0);
    ck_assert_uint_le(bytes, 16 * n + 4);
    double *vg2 = calloc(n + 1, sizeof *vg2), *r2 = calloc(n + 1, sizeof *r2);
    const char *damage = "not set";
    ck_assert_int_eq(sl__store_unpack_sweep(vg2, r2, n, blob, bytes, &damage), SL_OK);
    ck_assert_ptr_null(damage);
    ck_assert_int_eq(memcmp(vg, vg2, n * sizeof *vg), 0);
    ck_assert_int_eq(memcmp(r, r2, n * sizeof *r), 0);
    free(vg2);
    free(r2);
    free(blob);
    return bytes;
}

static size_t round_trip(const double *vg, const double *r, size_t n)
{
    return round_trip_over(vg, r, n, NAN);
}

START_TEST(blob_round_trips_generated_sweeps)
{
    uint64_t rng = 20240611;
    double *vg = malloc(1000 * sizeof *vg), *r = malloc(1000 * sizeof *r);
    for (size_t n = 1; n <= 1000; n++) {
        column_kind vg_kind = (column_kind)(n % N_KINDS), r_kind = (column_kind)(n / N_KINDS % N_KINDS);
        fill_column(vg, n, vg_kind, &rng);
        fill_column(r, n, r_kind, &rng);
        int special = n % 3 == 0;
        if (special) {
            sprinkle_specials(vg, n, &rng);
            sprinkle_specials(r, n, &rng);
        }
        size_t bytes = round_trip(vg, r, n);
        /* steps of at most 1000 units at the column's scale: 2 bytes a value */
        if (!special && vg_kind <= UNEVEN_STEPS && r_kind <= UNEVEN_STEPS)
            ck_assert_msg(bytes <= 4 * n + 10, "n %zu: %zu bytes", n, bytes);
    }
    free(vg);
    free(r);
}
END_TEST

/* A sweep as the CSV holds it: gate voltages "%.4f" from -40 V in 0.4 V
 * steps, resistances "%.6g" of a peak at the neutrality point. */
static size_t csv_like_sweep(double *vg, double *r, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        vg[i] = decimal(-400000 + 4000 * (long long)i, 4);
        double x = (vg[i] - 5.0) / 8.0;
        r[i] = six_digits(900.0 + 4000.0 / sqrt(1.0 + x * x) + 3.0 * sin(7.0 * (double)i));
    }
    return n;
}

START_TEST(blob_is_compact_for_a_csv_sweep)
{
    double vg[201], r[201];
    size_t n = csv_like_sweep(vg, r, 201);
    ck_assert_uint_le(round_trip(vg, r, n), 16 * n / 4);
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, n, NAN, &bytes);
    ck_assert_int_eq(blob[0], 1);
    ck_assert_int_eq(blob[1], 5);            /* even steps */
    ck_assert_int_eq(blob[2], 1);            /* in tenths of a volt */
    /* -40 V: -400 tenths, zigzagged 799, two bytes; then -39.6 V: from the
     * prediction -800 a residual of 404, zigzagged 808, two bytes */
    ck_assert(blob[7] == 1 || blob[7] == 2); /* the r_ohm column's mode */
    free(blob);
    /* a gate that does not step evenly keeps its decimal residuals */
    vg[100] += 0.1;
    blob = sl__store_pack_sweep(vg, r, n, NAN, &bytes);
    ck_assert(blob[1] == 1 || blob[1] == 2);
    free(blob);
    round_trip(vg, r, n);
}
END_TEST

/* A drain current as a meter writes it, seven digits ("%.7g"), read in
 * the unit 10^unit_exp10 A ("Id (uA)": -6) and scaled to amperes as a
 * correct strtod reads the text with the exponent joined: the double the
 * CSV reader gives (test_csv checks it against strtod). */
static double meter_current_A(double current_A, int unit_exp10)
{
    char text[48], joined[64];
    snprintf(text, sizeof text, "%.7g", current_A / pow(10.0, unit_exp10));
    char *e = strchr(text, 'e');
    int exp10 = unit_exp10;
    if (e) {
        exp10 += atoi(e + 1);
        *e = '\0';
    }
    snprintf(joined, sizeof joined, "%se%d", text, exp10);
    return strtod(joined, NULL);
}

/* The sweep of csv_like_sweep as a meter measures it: drain currents at a
 * drain bias of vd_V, R = |V_d / I_d| as the import works it out, the
 * currents' sign the meter's (negative with sign < 0). */
static size_t current_sweep(double *vg, double *r, size_t n, double vd_V, int unit_exp10, int sign)
{
    csv_like_sweep(vg, r, n);
    for (size_t i = 0; i < n; i++) {
        double id_A = sign * meter_current_A(vd_V / r[i], unit_exp10);
        r[i] = fabs(vd_V / id_A);
    }
    return n;
}

/* The mode byte of the r_ohm column of a packed sweep whose vg column is
 * decimal (its mode and scale bytes, then a varint a point, or two for
 * even steps). */
static int r_mode_of(const unsigned char *blob, size_t n)
{
    const unsigned char *p = blob + 3;
    size_t varints = blob[1] == 5 && n > 2 ? 2 : n;
    for (size_t i = 0; i < varints; p++)
        i += !(*p & 0x80);
    return *p;
}

START_TEST(blob_stores_meter_currents_as_quotients)
{
    const struct {
        double vd_V;
        int unit_exp10, sign;
    } meters[] = { { 0.1, 0, 1 }, { 0.05, -6, 1 }, { 0.05, -3, -1 }, { 1.0, -9, 1 },
                   { 0.025, -6, -1 } };
    double vg[201], r[201];
    for (size_t k = 0; k < sizeof meters / sizeof meters[0]; k++) {
        size_t n = current_sweep(vg, r, 201, meters[k].vd_V, meters[k].unit_exp10, meters[k].sign);
        size_t raw_bytes = round_trip(vg, r, n);
        size_t bytes = round_trip_over(vg, r, n, meters[k].vd_V);
        /* seven digits that change by some thousands of units a point: three
         * varint bytes at most, not the eight of a raw double */
        ck_assert_msg(bytes <= raw_bytes - 4 * n, "meter %zu: %zu bytes, raw %zu", k, bytes,
                      raw_bytes);
        size_t length = 0;
        unsigned char *blob = sl__store_pack_sweep(vg, r, n, meters[k].vd_V, &length);
        int mode = r_mode_of(blob, n);
        ck_assert_msg(mode == 3 || mode == 4, "meter %zu: mode %d", k, mode);
        free(blob);
    }
}
END_TEST

/* A drain bias that is no drain bias: the column stays raw. Drain biases
 * the resistances are not over, or that change within the sweep, special
 * values: every bit back, in no more bytes than raw. */
START_TEST(blob_quotient_falls_back_to_raw)
{
    double vg[201], r[201];
    size_t n = current_sweep(vg, r, 201, 0.1, 0, 1), length = 0;
    const double no_bias[] = { 0.0, -0.1, NAN, INFINITY };
    for (size_t k = 0; k < sizeof no_bias / sizeof no_bias[0]; k++) {
        unsigned char *blob = sl__store_pack_sweep(vg, r, n, no_bias[k], &length);
        ck_assert_msg(r_mode_of(blob, n) == 0, "drain bias %.17g", no_bias[k]);
        free(blob);
    }
    size_t raw_bytes = round_trip(vg, r, n);
    ck_assert_uint_le(round_trip_over(vg, r, n, 0.2), raw_bytes);
    ck_assert_uint_le(round_trip_over(vg, r, n, 0.1 + 1e-12), raw_bytes);
    /* the second half measured at 0.2 V */
    for (size_t i = n / 2; i < n; i++)
        r[i] = fabs(0.2 / meter_current_A(0.2 / r[i], 0));
    round_trip_over(vg, r, n, 0.1);
    uint64_t rng = 99;
    for (int trial = 0; trial < 200; trial++) {
        current_sweep(vg, r, n, 0.1, 0, 1);
        sprinkle_specials(r, n, &rng);
        round_trip_over(vg, r, n, 0.1);
    }
    /* currents of 1e-20 A need 10^27: beyond the decimal's 10^22 */
    for (size_t i = 0; i < n; i++)
        r[i] = fabs(0.1 / meter_current_A(1.234567e-20 * (1.0 + (double)i / 1000.0), 0));
    ck_assert_uint_eq(round_trip_over(vg, r, n, 0.1), round_trip(vg, r, n));
}
END_TEST

/* A memo of the last gate voltages gives the blob packing without one
 * gives, byte for byte, whether the sweeps share their gate voltages, have
 * other ones, other counts, or values no decimal holds. */
START_TEST(blob_memo_packs_as_without)
{
    uint64_t rng = 31;
    double vg[201], r[201];
    sl__sweep_memo memo = { 0 };
    for (int trial = 0; trial < 300; trial++) {
        size_t n = trial % 7 == 6 ? 150 : 201;
        csv_like_sweep(vg, r, n);
        if (trial % 5 == 4)
            vg[random_below(&rng, (long long)n)] += 0.1; /* other gate voltages */
        if (trial % 11 == 10)
            sprinkle_specials(vg, n, &rng);
        for (size_t i = 0; i < n; i++)
            r[i] = six_digits(r[i] * (1.0 + (double)random_below(&rng, 1000) / 1e4));
        size_t bytes = 0, memo_bytes = 0;
        unsigned char *blob = sl__store_pack_sweep(vg, r, n, NAN, &bytes);
        unsigned char *memo_blob = sl__store_pack_sweep_memo(vg, r, n, NAN, &memo, &memo_bytes);
        ck_assert_uint_eq(memo_bytes, bytes);
        ck_assert_msg(memcmp(blob, memo_blob, bytes) == 0, "trial %d", trial);
        ck_assert_uint_eq(memo.n, n); /* kept for the next */
        free(blob);
        free(memo_blob);
    }
    sl__sweep_memo_clear(&memo);
}
END_TEST

/* The mode and scale bytes of the vg column of a sweep of v four times
 * (once, a large mantissa would cost more bytes than the raw double). */
static int vg_mode_of(double v, int *scale)
{
    const double vg[] = { v, v, v, v }, r[] = { 1, 1, 1, 1 };
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, 4, NAN, &bytes);
    ck_assert_ptr_nonnull(blob);
    int mode = blob[1];
    *scale = blob[2];
    free(blob);
    round_trip(vg, r, 4);
    return mode;
}

START_TEST(blob_decimal_limits)
{
    const struct {
        double v;
        int mode, scale;
    } cases[] = {
        { 9007199254740991.0, 1, 0 }, /* 2^53 - 1 */
        { 9007199254740992.0, 0, 0 }, /* 2^53 */
        { 1e-22, 1, 22 },
        { 123e-23, 0, 0 },            /* needs 10^23 */
        { 1e22, 0, 0 },
        { 927.597, 1, 3 },
        { -39.6, 1, 1 },
        { 0.0, 1, 0 },
        { -0.0, 0, 0 },
        { 0.1 + 0.2, 0, 0 },          /* 0.30000000000000004: 17 digits */
        { 5e-324, 0, 0 },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        int scale = -1, mode = vg_mode_of(cases[i].v, &scale);
        /* four equal values are even steps (5) where a decimal (1) takes
         * no more bytes than raw */
        if (mode == 5 && cases[i].mode == 1)
            mode = 1;
        ck_assert_msg(mode == cases[i].mode, "%.17g: mode %d", cases[i].v, mode);
        if (mode != 0)
            ck_assert_msg(scale == cases[i].scale, "%.17g: scale %d", cases[i].v, scale);
    }
    const double none[1] = { 0 };
    ck_assert_uint_eq(round_trip(none, none, 0), 3); /* format and two mode bytes */
}
END_TEST

START_TEST(blob_pads_a_multiple_of_16)
{
    /* vg 0, 1, 2, 3, 5 (no even steps) and r 1000 five times:
     * 1 + (2 + 5) + (2 + 2 + 4) = 16 bytes */
    const double vg[] = { 0, 1, 2, 3, 5 }, r[] = { 1000, 1000, 1000, 1000, 1000 };
    size_t bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, 5, NAN, &bytes);
    ck_assert_uint_eq(bytes, 17);
    ck_assert_int_eq(blob[16], 0);
    round_trip(vg, r, 5);
    double vg2[5], r2[5];
    const char *damage = NULL;
    ck_assert_int_eq(sl__store_unpack_sweep(vg2, r2, 5, blob, 16, &damage), SL_EDB);
    ck_assert_str_eq(damage, "its length does not match its points");
    blob[16] = 1;
    ck_assert_int_eq(sl__store_unpack_sweep(vg2, r2, 5, blob, 17, &damage), SL_EDB);
    ck_assert_str_eq(damage, "its length does not match its points");
    free(blob);
}
END_TEST

static const char *damage_of(const unsigned char *blob, size_t bytes, size_t n)
{
    double vg[4], r[4];
    const char *damage = NULL;
    ck_assert_uint_le(n, 4);
    sl_status st = sl__store_unpack_sweep(vg, r, n, blob, bytes, &damage);
    ck_assert_int_eq(st, damage ? SL_EDB : SL_OK);
    return damage ? damage : "";
}

START_TEST(blob_damage_is_named)
{
    static const unsigned char long_varint[] = { 1, 1, 0, 0xff, 0xff, 0xff, 0xff,
                                                 0xff, 0xff, 0xff, 0xff, 0x01 };
    static const unsigned char huge_mantissa[] = { 1, 1, 0, 0xff, 0xff, 0xff, 0xff,
                                                   0xff, 0xff, 0xff, 0x7f, 0, 0 };
    static const unsigned char bad_mode[] = { 1, 7, 0, 0, 1, 0, 0 };
    static const unsigned char bad_format[] = { 2, 1, 0, 0, 1, 0, 0 };
    static const unsigned char bad_scale[] = { 1, 1, 23, 0, 1, 0, 0 };
    static const unsigned char trailing[] = { 1, 1, 0, 0, 1, 0, 0, 9 };
    static const unsigned char good[] = { 1, 1, 0, 0, 1, 0, 0 };
    ck_assert_str_eq(damage_of(good, sizeof good, 1), "");
    ck_assert_str_eq(damage_of(long_varint, sizeof long_varint, 1), "a varint runs on too long");
    ck_assert_str_eq(damage_of(huge_mantissa, sizeof huge_mantissa, 1), "a mantissa is out of range");
    ck_assert_str_eq(damage_of(bad_mode, sizeof bad_mode, 1), "a column has an unknown mode");
    ck_assert_str_eq(damage_of(bad_format, sizeof bad_format, 1), "its format is unknown");
    ck_assert_str_eq(damage_of(bad_scale, sizeof bad_scale, 1), "a decimal scale is out of range");
    /* a quotient column: q = 0.5 (0x3FE0000000000000), d = 2 / 10^0: 0.25 */
    static const unsigned char quotient[] = { 1, 1, 0, 0, 3, 0, 0, 0, 0, 0, 0, 0xe0, 0x3f, 0, 4 };
    double vg[1], r[1];
    const char *damage = NULL;
    ck_assert_int_eq(sl__store_unpack_sweep(vg, r, 1, quotient, sizeof quotient, &damage), SL_OK);
    ck_assert(vg[0] == 0.0 && r[0] == 0.25);
    ck_assert_str_eq(damage_of(quotient, 10, 1), "it ends early");  /* within q */
    ck_assert_str_eq(damage_of(quotient, 14, 1), "it ends early");  /* before its varint */
    ck_assert_str_eq(damage_of(trailing, sizeof trailing, 1), "its length does not match its points");
    ck_assert_str_eq(damage_of(good, 5, 1), "it ends early");
    ck_assert_str_eq(damage_of(good, sizeof good, 4), "it ends early");
    ck_assert_str_eq(damage_of(NULL, 0, 1), "its length does not match its points");
}
END_TEST

/* Evenly stepped gate voltages come back whatever their count, and an
 * even-steps mode in the r_ohm column, or one that runs out of range, is
 * damage. */
START_TEST(blob_even_steps)
{
    double vg[40] = { 0 }, r[40] = { 0 };
    for (size_t n = 0; n <= 40; n++) {
        for (size_t i = 0; i < n; i++) {
            vg[i] = decimal(-1234 + 25 * (long long)i, 2);
            r[i] = six_digits(1000.0 + 10.0 * (double)(i * i % 7));
        }
        round_trip(vg, r, n);
    }
    /* vg 0, 1; r 7 in mode 5: stored as two residuals, 0 and 2 */
    static const unsigned char r_even[] = { 1, 1, 0, 0, 2, 5, 0, 0, 14 };
    ck_assert_str_eq(damage_of(r_even, sizeof r_even, 2), "a column has an unknown mode");
    /* vg from 0 in steps of 2^52: the third point is out of range */
    static const unsigned char too_far[] = { 1, 5, 0, 0, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80,
                                             0x80, 0x10, 1, 0, 0, 0, 0 };
    ck_assert_str_eq(damage_of(too_far, sizeof too_far, 3), "a mantissa is out of range");
}
END_TEST

/* Every cut and random bytes of blob (n points): a damage named, or
 * values, never a crash or an overread. */
static void assert_damage_never_crashes(const unsigned char *blob, size_t bytes, size_t n)
{
    double vg2[201], r2[201];
    ck_assert_uint_le(n, 201);
    const char *damage = NULL;
    for (size_t cut = 0; cut < bytes; cut++) {
        unsigned char *part = malloc(cut ? cut : 1); /* exact size: ASan sees overreads */
        memcpy(part, blob, cut);
        ck_assert_int_eq(sl__store_unpack_sweep(vg2, r2, n, part, cut, &damage), SL_EDB);
        ck_assert_ptr_nonnull(damage);
        free(part);
    }
    uint64_t rng = 7;
    unsigned char *copy = malloc(bytes);
    for (int trial = 0; trial < 5000; trial++) {
        memcpy(copy, blob, bytes);
        for (long long hits = 1 + random_below(&rng, 3); hits > 0; hits--)
            copy[random_below(&rng, (long long)bytes)] = (unsigned char)next_random(&rng);
        size_t length = bytes - (size_t)random_below(&rng, 2);
        sl_status st = sl__store_unpack_sweep(vg2, r2, n, copy, length, &damage);
        ck_assert_int_eq(st, damage ? SL_EDB : SL_OK);
    }
    free(copy);
}

START_TEST(blob_truncated_or_mutated_never_crashes)
{
    double vg[201], r[201];
    size_t n = csv_like_sweep(vg, r, 201), bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, n, NAN, &bytes);
    assert_damage_never_crashes(blob, bytes, n);
    free(blob);
    current_sweep(vg, r, n, 0.05, -6, 1);
    blob = sl__store_pack_sweep(vg, r, n, 0.05, &bytes);
    ck_assert_int_eq(r_mode_of(blob, n) / 3, 1); /* a quotient column */
    assert_damage_never_crashes(blob, bytes, n);
    free(blob);
}
END_TEST

/* A stored device without a sweep; its id. */
static long device_without_sweep(stored_demo *s, const char *name)
{
    sl_store_device d = device_named("W01", name);
    return insert_added(s->store, s->lot.lot_id, s->run_id, &d);
}

static void put_sweep_row(sl_store *store, long device_id, long n_points, const void *blob,
                          int bytes)
{
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(store->db,
                                        "INSERT INTO sweep (measurement_id, n_points, points) "
                                        "VALUES (?1, ?2, ?3) ON CONFLICT (measurement_id) DO UPDATE "
                                        "SET n_points = excluded.n_points, points = excluded.points", 0, &st), SL__DB_OK);
    sl__db_bind_int64(st, 1, device_id);
    sl__db_bind_int64(st, 2, n_points);
    sl__db_bind_blob(st, 3, blob, (size_t)bytes);
    ck_assert_int_eq(sl__db_step(st), SL__DB_DONE);
    sl__db_finalize(st);
}

START_TEST(old_raw_sweep_still_loads)
{
    stored_demo s = demo_store();
    /* 5e-324 is 0x0000000000000001: the raw blob starts with the compact
     * format's byte, and only its length tells them apart */
    const double vg[] = { 5e-324, -39.6, -0.0 }, r[] = { 927.597, NAN, 1e300 };
    unsigned char raw[48];
    for (size_t i = 0; i < 3; i++) {
        uint64_t bits[2];
        memcpy(&bits[0], &vg[i], 8);
        memcpy(&bits[1], &r[i], 8);
        for (int b = 0; b < 16; b++)
            raw[16 * i + (size_t)b] = (unsigned char)(bits[b / 8] >> (8 * (b % 8)));
    }
    ck_assert_int_eq(raw[0], 1);
    long id = device_without_sweep(&s, "D001");
    put_sweep_row(s.store, id, 3, raw, 48);
    sl_diag *diag = sl_diag_new();
    double *vg2 = NULL, *r2 = NULL;
    size_t n2 = 0;
    ck_assert_int_eq(sl_store_load_sweep(s.store, &vg2, &r2, &n2, id, diag), SL_OK);
    ck_assert_uint_eq(n2, 3);
    ck_assert_int_eq(memcmp(vg2, vg, sizeof vg), 0);
    ck_assert_int_eq(memcmp(r2, r, sizeof r), 0);
    free(vg2);
    free(r2);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* Load a sweep that must be damaged; returns the message. */
static char *load_damaged(sl_store *store, long id)
{
    sl_diag *diag = sl_diag_new();
    double *vg = NULL, *r = NULL;
    size_t n = 99;
    ck_assert_int_eq(sl_store_load_sweep(store, &vg, &r, &n, id, diag), SL_EDB);
    ck_assert(vg == NULL && r == NULL && n == 0);
    char *message = strdup(sl_diag_last(diag));
    sl_diag_free(diag);
    return message;
}

START_TEST(damaged_sweep_is_a_database_error)
{
    stored_demo s = demo_store();
    double vg[201], r[201];
    size_t n = csv_like_sweep(vg, r, 201), bytes = 0;
    unsigned char *blob = sl__store_pack_sweep(vg, r, n, NAN, &bytes);
    long id = device_without_sweep(&s, "D001");
    char expected[160], *message;

    put_sweep_row(s.store, id, 201, blob, (int)bytes - 5); /* truncated */
    message = load_damaged(s.store, id);
    snprintf(expected, sizeof expected,
             "sweep of measurement %ld is damaged: it ends early (%zu bytes for 201 points)", id,
             bytes - 5);
    ck_assert_str_eq(message, expected);
    free(message);

    blob[1] = 9; /* no such mode */
    put_sweep_row(s.store, id, 201, blob, (int)bytes);
    message = load_damaged(s.store, id);
    ck_assert_msg(strstr(message, "damaged: a column has an unknown mode") != NULL, "%s", message);
    free(message);

    put_sweep_row(s.store, id, 1000000000, blob, (int)bytes); /* more points than bytes */
    message = load_damaged(s.store, id);
    ck_assert_msg(strstr(message, "its length does not match its points") != NULL, "%s", message);
    free(message);

    put_sweep_row(s.store, id, -1, blob, (int)bytes);
    free(load_damaged(s.store, id));
    free(blob);
    demo_store_free(&s);
}
END_TEST

START_TEST(damaged_staged_points_are_a_database_error)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    const double vg[] = { 1.0, 2.0 }, r[] = { 10.0, 20.0 };
    ck_assert_int_eq(sl_store_stage_points(s.store, 7, vg, r, 2, diag), SL_OK);
    sl__stmt *st = NULL;
    const unsigned char damaged[] = { 0x01, 0x01, 0x05 };
    ck_assert_int_eq(sl__db_prepare(s.store->db, "UPDATE stage SET points = ?1", 0, &st), SL__DB_OK);
    sl__db_bind_blob(st, 1, damaged, sizeof damaged);
    ck_assert_int_eq(sl__db_step(st), SL__DB_DONE);
    sl__db_finalize(st);
    double *vg2 = NULL, *r2 = NULL;
    size_t n = 99;
    ck_assert_int_eq(sl_store_staged_points(s.store, &vg2, &r2, &n, 7, diag), SL_EDB);
    ck_assert(vg2 == NULL && r2 == NULL && n == 0);
    ck_assert_str_eq(sl_diag_last(diag),
                     "staged sweep points under key 7 are damaged: it ends early");
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* ---- the scratch space of an analysis ---- */

/* A device of the demo lot committed through store (which may be another
 * connection than s->store). */
static void add_device(const stored_demo *s, sl_store *store, const char *wafer, const char *name,
                       long die_x, long die_y, const char *fit_class, double cnp_V)
{
    sl_diag *diag = sl_diag_new();
    sl_store_device d = device_named(wafer, name);
    d.die_x = die_x;
    d.die_y = die_y;
    d.fit_class = fit_class;
    d.cnp_V = cnp_V;
    ck_assert_int_eq(sl_store_begin(store, diag), SL_OK);
    insert_added(store, s->lot.lot_id, s->run_id, &d);
    ck_assert_int_eq(sl_store_commit(store, diag), SL_OK);
    sl_diag_free(diag);
}

static void check_same_row(const sl_store_device_row *got, const sl_store_device_row *want)
{
    ck_assert_int_eq(got->id, want->id);
    ck_assert_str_eq(got->wafer, want->wafer);
    ck_assert_str_eq(got->name, want->name);
    ck_assert_str_eq(got->fit_class, want->fit_class);
    ck_assert(got->die_x == want->die_x && got->die_y == want->die_y);
    ck_assert(got->cnp_V == want->cnp_V || (isnan(got->cnp_V) && isnan(want->cnp_V)));
    ck_assert(got->mobility_cm2_per_Vs == want->mobility_cm2_per_Vs);
}

/* Devices kept wafer by wafer come back in sl_store_load_devices order with
 * the caller's group and tag, as often as asked; the V_cnp of one fit class
 * alone; listed devices by severity, then wafer and name; an import another
 * connection commits while the scratch is open is not seen; closing leaves
 * the scratch tables empty and the page cache as it was. */
START_TEST(scratch_keeps_ranks_and_reads_one_snapshot)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    add_device(&s, s.store, "W02", "B", 0, 0, "ok", 2.5); /* not in die or wafer order */
    add_device(&s, s.store, "W01", "C", 1, 1, "ok", 1.5);
    add_device(&s, s.store, "W01", "A", 0, 1, "unmeasured", NAN);
    add_device(&s, s.store, "W01", "B", 1, 0, "ok", -0.5);
    add_device(&s, s.store, "W02", "A", 0, 0, "short", NAN);
    sl_store_device_row *rows = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &n, s.lot.lot_id, "final", 300.0, diag), SL_OK);
    ck_assert_uint_eq(n, 5);
    long cache_before = sl_test_pg() ? 0 : query_long(s.store, "PRAGMA cache_size");

    sl_store_scratch *x = NULL;
    ck_assert_int_eq(sl_store_scratch_open(&x, s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_scratch_view(x, s.lot.lot_id, "final", 300.0, diag), SL_OK);
    ck_assert_int_eq(sl_store_scratch_keep_wafer(x, s.lot.lot_id, "W01", 7, 1, diag), SL_OK);
    sl_store *other = open_ok(s.db);
    add_device(&s, other, "W02", "Z", 5, 5, "ok", 9.0);
    add_device(&s, other, "W03", "Z", 5, 5, "ok", 9.0);
    sl_store_close(other);
    ck_assert_int_eq(sl_store_scratch_keep_wafer(x, s.lot.lot_id, "W02", 8, 2, diag), SL_OK);
    ck_assert_int_eq(sl_store_scratch_keep_wafer(x, s.lot.lot_id, "W03", 9, 3, diag), SL_OK);
    const sl_store_device_row *r = NULL;
    long group = 0, tag = 0;
    for (int round = 0; round < 2; round++) {
        for (size_t i = 0; i < n; i++) {
            ck_assert_int_eq(sl_store_scratch_next_kept(x, &group, &tag, &r, diag), SL_OK);
            ck_assert_ptr_nonnull(r);
            check_same_row(r, &rows[i]);
            ck_assert_int_eq(group, strcmp(rows[i].wafer, "W01") == 0 ? 7 : 8);
            ck_assert_int_eq(tag, group - 6);
        }
        ck_assert_int_eq(sl_store_scratch_next_kept(x, &group, &tag, &r, diag), SL_OK);
        ck_assert_ptr_null(r);
    }

    static const double want_v[] = { -0.5, 1.5, 2.5 }; /* W01 B, W01 C, W02 B */
    static const long want_group[] = { 7, 7, 8 };
    const size_t n_values = sizeof want_v / sizeof want_v[0];
    ck_assert_int_eq(sl_store_scratch_keep_values(x, "ok", diag), SL_OK);
    for (size_t i = 0; i <= n_values; i++) {
        int more = 0;
        sl_store_scratch_value v;
        ck_assert_int_eq(sl_store_scratch_next_value(x, &more, &v, diag), SL_OK);
        ck_assert_int_eq(more, i < n_values);
        if (more)
            ck_assert(v.cnp_V == want_v[i] && v.group == want_group[i] &&
                      v.tag == want_group[i] - 6);
    }

    /* kept order W01 B, A, C, W02 A, B: severities 3, 5, 3, 3, none */
    static const double severity[] = { 3.0, 5.0, 3.0, 3.0 };
    const size_t n_ranked = sizeof severity / sizeof severity[0];
    for (size_t i = 0; i < n_ranked; i++) {
        ck_assert_int_eq(sl_store_scratch_next_kept(x, &group, &tag, &r, diag), SL_OK);
        ck_assert_int_eq(sl_store_scratch_rank(x, severity[i], diag), SL_OK);
    }
    sl_store_scratch_rewind(x);
    static const char *const want_ranked[][2] = { { "W01", "A" }, { "W01", "B" }, { "W01", "C" },
                                                  { "W02", "A" } };
    for (size_t i = 0; i <= n_ranked; i++) {
        ck_assert_int_eq(sl_store_scratch_next_ranked(x, &group, &tag, &r, diag), SL_OK);
        ck_assert_int_eq(r != NULL, i < n_ranked);
        if (r)
            ck_assert(strcmp(r->wafer, want_ranked[i][0]) == 0 &&
                      strcmp(r->name, want_ranked[i][1]) == 0 && group == (i < 3 ? 7 : 8));
    }
    sl_store_scratch_close(x);
    if (!sl_test_pg()) { /* PostgreSQL: the snapshot transaction took them with it */
        ck_assert_int_eq(query_long(s.store, "PRAGMA cache_size"), cache_before);
        ck_assert_int_eq(query_long(s.store, "SELECT (SELECT count(*) FROM temp.sl_scratch_kept) + "
                                             "(SELECT count(*) FROM temp.sl_scratch_values) + "
                                             "(SELECT count(*) FROM temp.sl_scratch_rank)"), 0);
    }
    free(rows);
    ck_assert_int_eq(sl_store_load_devices(s.store, &rows, &n, s.lot.lot_id, "final", 300.0, diag), SL_OK);
    ck_assert_uint_eq(n, 7); /* the other connection's devices, now the scratch is gone */
    ck_assert_int_eq(sl_store_scratch_open(&x, s.store, diag), SL_OK);
    sl_store_scratch_close(x);
    free(rows);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* More flagged devices than go to the server in one statement (600: two
 * batches of 256 and the rest) come back by severity, the highest first. */
START_TEST(scratch_ranks_many_in_order)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    static const char *const names[] = { "A", "B", "C" };
    for (int j = 0; j < 3; j++)
        add_device(&s, s.store, "W01", names[j], j, 0, "ok", 1.0 + j);
    sl_store_scratch *x = NULL;
    ck_assert_int_eq(sl_store_scratch_open(&x, s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_scratch_view(x, s.lot.lot_id, "final", 300.0, diag), SL_OK);
    ck_assert_int_eq(sl_store_scratch_keep_wafer(x, s.lot.lot_id, "W01", 1, 1, diag), SL_OK);
    const sl_store_device_row *r = NULL;
    long group = 0, tag = 0;
    for (int pass = 0; pass < 200; pass++) {
        for (int j = 0; j < 3; j++) {
            ck_assert_int_eq(sl_store_scratch_next_kept(x, &group, &tag, &r, diag), SL_OK);
            ck_assert_str_eq(r->name, names[j]); /* kept in die order */
            ck_assert_int_eq(sl_store_scratch_rank(x, 3.0 * pass + j, diag), SL_OK);
        }
        sl_store_scratch_rewind(x);
    }
    for (int i = 0; i <= 600; i++) {
        ck_assert_int_eq(sl_store_scratch_next_ranked(x, &group, &tag, &r, diag), SL_OK);
        ck_assert_int_eq(r != NULL, i < 600);
        if (r)
            ck_assert_msg(strcmp(r->name, names[(599 - i) % 3]) == 0, "%d: %s", i, r->name);
    }
    sl_store_scratch_close(x);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* Inside an analysis's scratch a sweep read twice in a row (as the
 * analysis does) is the same sweep, and reading another in between or a
 * measurement without one never hands back the wrong points. */
START_TEST(sweeps_read_again_in_a_scratch)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    const double vg[2][3] = { { -1.0, 0.0, 1.0 }, { -2.0, 0.5, 2.0 } };
    const double r[2][3] = { { 900.0, 2000.0, 950.0 }, { 800.0, 1500.0, 700.0 } };
    long ids[3];
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s.store, s.lot.lot_id, diag), SL_OK);
    static const char *const names[] = { "A", "B", "C" };
    for (int i = 0; i < 3; i++) {
        sl_store_device d = device_named("W01", names[i]);
        d.vg_V = i < 2 ? vg[i] : NULL;
        d.r_ohm = i < 2 ? r[i] : NULL;
        d.n_points = i < 2 ? 3 : 0;
        ids[i] = insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    }
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    sl_store_scratch *x = NULL;
    ck_assert_int_eq(sl_store_scratch_open(&x, s.store, diag), SL_OK);
    static const int order[] = { 0, 0, 1, 0, 2, 2, 1, 1 };
    for (size_t k = 0; k < sizeof order / sizeof order[0]; k++) {
        int i = order[k];
        double *got_vg = NULL, *got_r = NULL;
        size_t n = 0;
        sl_status st = sl_store_load_sweep(s.store, &got_vg, &got_r, &n, ids[i], diag);
        if (i == 2) {
            ck_assert_int_eq(st, SL_ENOTFOUND);
        } else {
            ck_assert_int_eq(st, SL_OK);
            ck_assert_uint_eq(n, 3);
            for (size_t j = 0; j < 3; j++)
                ck_assert(got_vg[j] == vg[i][j] && got_r[j] == r[i][j]);
        }
        free(got_vg);
        free(got_r);
    }
    sl_store_scratch_close(x);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* ---- the schema migration from version 3 ---- */

/* One CSV line of a dump (no quoted commas in these dumps) split in place. */
static size_t split_fields(char *line, char **fields, size_t max)
{
    size_t n = 0;
    for (char *p = line; n < max; n++) {
        fields[n] = p;
        char *comma = strchr(p, ',');
        if (!comma) {
            n++;
            break;
        }
        *comma = '\0';
        p = comma + 1;
    }
    return n;
}

/* A dumped number to 17 digits against a stored REAL ("NULL" for NULL). */
static void check_real(sl__stmt *st, int col, const char *want, const char *what)
{
    if (strcmp(want, "NULL") == 0)
        ck_assert_msg(sl__db_column_is_null(st, col), "%s: not NULL", what);
    else
        ck_assert_msg(!sl__db_column_is_null(st, col) &&
                      sl__db_column_double(st, col) == strtod(want, NULL),
                      "%s: %.17g, dumped %s", what, sl__db_column_double(st, col), want);
}

/* tests/data/store/v3.db was written by the release before measurement runs
 * (tests/data/store/make_v3.sh): opened now, every device is still there
 * with every number (v3-devices.csv), every sweep blob byte for byte
 * (v3-sweeps.csv), each lot's measurements one run at its plan's first
 * temperature, step final; and the analysis reads them. */
START_TEST(migration_from_version_3_keeps_every_device)
{
    SL_TEST_SQLITE_ONLY(); /* SQLite's own files and pragmas */
    char *dir = sl_test_tmpdir();
    char *db = sl_test_path(dir, "v3.db");
    char *fixture = sl_test_data("store/v3.db");
    ck_assert_int_eq(sl_test_copy_file(fixture, db), 0);
    sl_store *store = open_ok(db);
    ck_assert_int_eq(query_long(store, "PRAGMA user_version"), sl_store_schema_version());
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM pragma_foreign_key_check"), 0);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM measurement_run"), 2);
    ck_assert_int_eq(query_long(store, "SELECT count(*) FROM measurement_run WHERE step = 'final' "
                                       "AND temperature_K = 300 AND source_sha256 IS NULL"), 2);
    char *source = query_text(store, "SELECT group_concat(source_name, '|') FROM "
                                     "(SELECT source_name FROM measurement_run ORDER BY id)");
    ck_assert_str_eq(source, "stats-results.csv|sim/sweeps.csv");
    free(source);

    char *path = sl_test_data("store/v3-devices.csv");
    char *text = sl_test_read_file(path, NULL);
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(store->db,
        "SELECT l.name, d.wafer, d.name, m.id, d.die_x, d.die_y, m.source, m.fit_class, "
        "quote(m.fit_model), m.cnp_V, m.cnp_sigma_V, m.mobility_cm2_per_Vs, "
        "m.mobility_sigma_cm2_per_Vs, m.n0_per_cm2, m.n0_sigma_per_cm2, m.r_contact_ohm, "
        "m.r_contact_sigma_ohm, m.rel_rms, m.r_squared, quote(m.n_points), quote(m.n_spikes), "
        "quote(m.source_line), m.current FROM measurement_view m JOIN device d ON d.id = m.device_id "
        "JOIN lot l ON l.id = d.lot_id ORDER BY m.id", 0, &st), SL__DB_OK);
    char *save = NULL, *line = strtok_r(text, "\n", &save); /* the header */
    size_t devices = 0;
    while ((line = strtok_r(NULL, "\n", &save))) {
        char *f[22];
        ck_assert_uint_eq(split_fields(line, f, 22), 22);
        ck_assert_int_eq(sl__db_step(st), SL__DB_ROW);
        for (int c = 0; c < 9; c++)
            if (c != 3 && c != 4 && c != 5)
                ck_assert_str_eq((const char *)sl__db_column_text(st, c),
                                 c == 8 && strcmp(f[c], "NULL") ? "'symmetric'" : f[c]);
        ck_assert_int_eq(sl__db_column_int64(st, 3), strtol(f[3], NULL, 10));
        ck_assert_int_eq(sl__db_column_int64(st, 4), strtol(f[4], NULL, 10));
        ck_assert_int_eq(sl__db_column_int64(st, 5), strtol(f[5], NULL, 10));
        for (int c = 9; c < 19; c++)
            check_real(st, c, f[c], f[2]);
        for (int c = 19; c < 22; c++)
            ck_assert_str_eq((const char *)sl__db_column_text(st, c), f[c]);
        ck_assert_int_eq(sl__db_column_int64(st, 22), 1); /* current in its view */
        devices++;
    }
    ck_assert_int_eq(sl__db_step(st), SL__DB_DONE);
    sl__db_finalize(st);
    ck_assert_uint_eq(devices, 70);
    free(text);
    free(path);

    path = sl_test_data("store/v3-sweeps.csv");
    text = sl_test_read_file(path, NULL);
    ck_assert_int_eq(sl__db_prepare(store->db,
        "SELECT measurement_id, n_points, hex(points) FROM sweep ORDER BY measurement_id", 0, &st), SL__DB_OK);
    save = NULL;
    line = strtok_r(text, "\n", &save);
    size_t sweeps = 0;
    while ((line = strtok_r(NULL, "\n", &save))) {
        char *f[3];
        ck_assert_uint_eq(split_fields(line, f, 3), 3);
        ck_assert_int_eq(sl__db_step(st), SL__DB_ROW);
        ck_assert_int_eq(sl__db_column_int64(st, 0), strtol(f[0], NULL, 10));
        ck_assert_int_eq(sl__db_column_int64(st, 1), strtol(f[1], NULL, 10));
        ck_assert_str_eq((const char *)sl__db_column_text(st, 2), f[2]);
        sweeps++;
    }
    ck_assert_int_eq(sl__db_step(st), SL__DB_DONE);
    sl__db_finalize(st);
    ck_assert_uint_eq(sweeps, 16);
    free(text);
    free(path);

    /* the sweeps decode, and a lot reads back in its default view */
    sl_diag *diag = sl_diag_new();
    double *vg = NULL, *r = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_store_load_sweep(store, &vg, &r, &n, 59, diag), SL_OK);
    ck_assert_uint_eq(n, 201);
    free(vg);
    free(r);
    sl_store_lot lot;
    ck_assert_int_eq(sl_store_find_lot(store, &lot, "STATS-01", diag), SL_OK);
    char step[65];
    double t = 0;
    const double temperatures[] = { 300.0 };
    ck_assert_int_eq(sl_store_default_view(store, step, &t, lot.lot_id, NULL, temperatures, 1,
                                           diag), SL_OK);
    ck_assert(strcmp(step, "final") == 0 && t == 300.0);
    sl_store_device_row *rows = NULL;
    ck_assert_int_eq(sl_store_load_devices(store, &rows, &n, lot.lot_id, step, t, diag), SL_OK);
    ck_assert_uint_eq(n, 54);
    free(rows);
    sl_store_lot_clear(&lot);
    sl_diag_free(diag);
    sl_store_close(store);
    free(fixture);
    free(db);
    drop_dir(dir);
}
END_TEST

/* ---- what a failed statement says ---- */

/* Each kind of constraint failure is named as what it is, never as a
 * duplicate; nothing is written. */
START_TEST(constraint_failures_say_which)
{
    stored_demo s = demo_store();
    static const struct { const char *sql, *kind; } cases[] = {
        { "INSERT INTO lot (name, created_utc) VALUES ('DEMO-01', 'now')", "a UNIQUE constraint" },
        { "INSERT INTO lot (name) VALUES ('OTHER')", "a NOT NULL constraint" },
        { "INSERT INTO measurement_run (lot_id, step, temperature_K, revision_id, kind, "
          "source_name, rows, devices, created_utc) VALUES (1, 'final', -4, 1, 'results', "
          "'x.csv', 0, 0, 'now')", "a CHECK constraint" },
        { "INSERT INTO measurement_run (lot_id, step, temperature_K, revision_id, kind, "
          "source_name, rows, devices, created_utc) VALUES (99, 'final', 4, 1, 'results', "
          "'x.csv', 0, 0, 'now')", "a FOREIGN KEY constraint" },
        { "INSERT INTO split (id, revision_id, split_index, name, dielectric, treatments, "
          "planned_doping_per_cm2, planned_doping_sigma_per_cm2, devices_needed, "
          "devices_available) SELECT id, revision_id, 99, 'x', 'x', '', 0, 0, 0, 0 FROM split "
          "LIMIT 1", "a PRIMARY KEY constraint" },
    };
    long runs = query_long(s.store, "SELECT count(*) FROM measurement_run");
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sl_diag *diag = sl_diag_new();
        ck_assert_int_eq(sl__store_exec(s.store, cases[i].sql, diag, "store a row"), SL_EDB);
        ck_assert_msg(strstr(sl_diag_last(diag), cases[i].kind) &&
                      strstr(sl_diag_last(diag), "cannot store a row: ") &&
                      !strstr(sl_diag_last(diag), "duplicate device"),
                      "%zu: %s", i, sl_diag_last(diag));
        sl_diag_free(diag);
    }
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement_run"), runs);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM lot"), 1);
    demo_store_free(&s);
}
END_TEST

/* The first failure of an import of one device into the demo lot: the
 * insert (SQLite writes at once) or the commit (PostgreSQL stages the row
 * and stores it by then). The message is left in diag. */
static sl_status import_one(stored_demo *s, const sl_store_device *d, long run_id, sl_diag *diag)
{
    sl_store_insert ins;
    ck_assert_int_eq(sl_store_begin(s->store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s->store, s->lot.lot_id, diag), SL_OK);
    sl_status st = sl_store_insert_measurement(s->store, &ins, s->lot.lot_id, run_id, d, diag);
    if (st == SL_OK)
        return sl_store_commit(s->store, diag);
    sl_store_rollback(s->store);
    return st;
}

/* A device the import cannot store names the kind of constraint it broke
 * (as constraint_failures_say_which), on either backend, and nothing of
 * it stays; a good device then goes in. */
START_TEST(import_constraint_failures_say_which)
{
    stored_demo s = demo_store();
    sl_store_device d = device_named("W01", "D001");
    sl_store_device no_class = d, short_channel = d;
    no_class.fit_class = NULL;
    short_channel.channel_length_um = -2.0;
    static const char *const kinds[] = { "a NOT NULL constraint", "a CHECK constraint",
                                         "a FOREIGN KEY constraint" };
    const sl_store_device *devices[] = { &no_class, &short_channel, &d };
    const long runs[] = { s.run_id, s.run_id, s.run_id + 1000 };
    for (size_t i = 0; i < 3; i++) {
        sl_diag *diag = sl_diag_new();
        ck_assert_int_eq(import_one(&s, devices[i], runs[i], diag), SL_EDB);
        ck_assert_msg(strstr(sl_diag_last(diag), kinds[i]) &&
                      strstr(sl_diag_last(diag), "nothing was changed") &&
                      !strstr(sl_diag_last(diag), "duplicate device"),
                      "%zu: %s", i, sl_diag_last(diag));
        sl_diag_free(diag);
        ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM device"), 0);
        ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 0);
    }
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(import_one(&s, &d, s.run_id, diag), SL_OK);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 1);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* Dies far from the wafer's centre and an import of many runs tell a
 * device met again apart as well as the common case (on PostgreSQL they
 * leave the staging table's fast path for the row-by-row one). */
START_TEST(far_dies_and_many_runs_keep_outcomes)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    sl_store_device far = device_named("W01", "FAR");
    far.die_x = 100000;
    far.die_y = -40000;
    sl_store_insert ins;
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s.store, s.lot.lot_id, diag), SL_OK);
    long first = insert_added(s.store, s.lot.lot_id, s.run_id, &far);
    ck_assert_int_eq(sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, s.run_id, &far, diag),
                     SL_OK);
    ck_assert(ins.outcome == SL_STORE_IN_RUN && ins.measurement_id == first);
    far.die_y = -32768;
    ck_assert_int_eq(sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, s.run_id, &far, diag),
                     SL_OK);
    ck_assert(ins.outcome == SL_STORE_DIE_DIFFERS && ins.die_x == 100000 && ins.die_y == -40000);
    /* 40 runs of one device, then each run again */
    long runs[40];
    sl_store_device d = device_named("W02", "D009");
    for (int i = 0; i < 40; i++) {
        ck_assert_int_eq(sl_store_add_run(s.store, &runs[i], s.lot.lot_id, s.lot.revision_id,
                                          "final", 10.0 + i, "sweeps", "many.csv", diag), SL_OK);
        insert_added(s.store, s.lot.lot_id, runs[i], &d);
    }
    for (int i = 0; i < 40; i++) {
        ck_assert_int_eq(sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, runs[i], &d, diag),
                         SL_OK);
        ck_assert_int_eq(ins.outcome, SL_STORE_IN_RUN);
    }
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_OK);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 41);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM device"), 2);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* PostgreSQL: the staged rows go in only where the device sits at their
 * die. A device another connection adds at another die while the import
 * runs (it takes no lot lock, as no splitlot command would) makes the
 * import fail with one message, nothing of it stored. */
START_TEST(staged_rows_clashing_with_stored_devices_refused)
{
    if (!sl_test_pg())
        return;
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    sl_store_device first = device_named("W01", "D000"), d = device_named("W01", "D001");
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s.store, s.lot.lot_id, diag), SL_OK);
    insert_added(s.store, s.lot.lot_id, s.run_id, &first);
    insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    sl_store *other = open_ok(s.db);
    char sql[256];
    snprintf(sql, sizeof sql, "INSERT INTO device (lot_id, wafer, name, die_x, die_y) VALUES "
             "(%ld, 'W01', 'D001', 7, 7)", s.lot.lot_id);
    ck_assert_int_eq(sl__db_exec(other->db, sql), SL__DB_OK);
    ck_assert_int_eq(sl_store_commit(s.store, diag), SL_EDB);
    ck_assert_msg(strstr(sl_diag_last(diag), "cannot store the imported devices: 1 of 2 "
                                             "measurements name a device the lot has at another die"),
                  "%s", sl_diag_last(diag));
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM measurement"), 0);
    ck_assert_int_eq(query_long(s.store, "SELECT count(*) FROM device"), 1);
    sl_store_close(other);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* PostgreSQL: the server ends the import's connection while its rows are
 * streaming (an open COPY): one message naming the lost connection,
 * "nothing was changed", and nothing of the import on the server. */
START_TEST(connection_lost_mid_copy_keeps_nothing)
{
    if (!sl_test_pg())
        return;
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    long pid = query_long(s.store, "SELECT pg_backend_pid()");
    ck_assert_int_eq(sl_store_begin(s.store, diag), SL_OK);
    ck_assert_int_eq(sl_store_begin_lot_inserts(s.store, s.lot.lot_id, diag), SL_OK);
    sl_store_device d = device_named("W01", "D000");
    insert_added(s.store, s.lot.lot_id, s.run_id, &d);
    ck_assert_int_eq(sl__db_pg_copying(s.store->db), 1);
    sl_store *other = open_ok(s.db);
    char sql[96];
    snprintf(sql, sizeof sql, "SELECT pg_terminate_backend(%ld)::int", pid);
    ck_assert_int_eq(query_long(other, sql), 1);
    d.name = "D001";
    sl_store_insert ins;
    sl_status st = sl_store_insert_measurement(s.store, &ins, s.lot.lot_id, s.run_id, &d, diag);
    if (st == SL_OK) /* the row may still fit the client's buffer */
        st = sl_store_commit(s.store, diag);
    else
        sl_store_rollback(s.store);
    ck_assert_int_eq(st, SL_EDB);
    ck_assert_uint_eq(sl_diag_size(diag), 1);
    ck_assert_msg(strstr(sl_diag_last(diag), "cannot be reached or closed the connection") &&
                  strstr(sl_diag_last(diag), "nothing was changed"), "%s", sl_diag_last(diag));
    ck_assert_int_eq(query_long(other, "SELECT count(*) FROM device"), 0);
    ck_assert_int_eq(query_long(other, "SELECT count(*) FROM measurement"), 0);
    sl_store_close(other);
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* A query that fails is an error naming what was asked, never a value: a
 * count of devices, the list of lots, and an unknown lot whose known lots
 * cannot be listed. */
START_TEST(failed_queries_are_errors)
{
    stored_demo s = demo_store();
    sl_diag *diag = sl_diag_new();
    long count = 12345;
    ck_assert_int_eq(sl__store_exec(s.store, sl_test_pg()
                                       ? "DROP VIEW measurement_view; "
                                         "ALTER TABLE device RENAME TO device_gone"
                                       : "PRAGMA foreign_keys = OFF; DROP VIEW measurement_view; "
                                         "ALTER TABLE device RENAME TO device_gone",
                                   diag, "break the schema"), SL_OK);
    ck_assert_int_eq(sl_store_count_devices(s.store, &count, s.lot.lot_id, diag), SL_EDB);
    ck_assert_int_eq(count, 12345);
    ck_assert_msg(strstr(sl_diag_last(diag), sl_test_pg() ? "relation \"device\" does not exist"
                                                          : "no such table: device"),
                  "%s", sl_diag_last(diag));
    sl_diag_clear(diag);
    ck_assert_int_eq(sl__store_exec(s.store, "ALTER TABLE lot RENAME TO lot_gone", diag,
                                   "break the schema"), SL_OK);
    char **names = NULL;
    size_t n = 7;
    ck_assert_int_eq(sl_store_list_lots(s.store, &names, &n, diag), SL_EDB);
    ck_assert(names == NULL && n == 0);
    sl_diag_clear(diag);
    sl_store_lot lot;
    ck_assert_int_eq(sl_store_find_lot(s.store, &lot, "NOPE", diag), SL_EDB);
    ck_assert_msg(!strstr(sl_diag_last(diag), "not in the database"), "%s", sl_diag_last(diag));
    sl_diag_clear(diag);
    /* a sweep that cannot be read is an error, never "no sweep stored" */
    ck_assert_int_eq(sl__store_exec(s.store, "ALTER TABLE sweep RENAME TO sweep_gone", diag,
                                   "break the schema"), SL_OK);
    double *vg = NULL, *r = NULL;
    size_t n_points = 3;
    ck_assert_int_eq(sl_store_load_sweep(s.store, &vg, &r, &n_points, 1, diag), SL_EDB);
    ck_assert(vg == NULL && r == NULL && n_points == 0);
    ck_assert_msg(strstr(sl_diag_last(diag), "sweep"), "%s", sl_diag_last(diag));
    sl_diag_free(diag);
    demo_store_free(&s);
}
END_TEST

/* ---- the checksum of a run's file ---- */

/* SHA-256 of the FIPS 180-2 appendix B examples ("abc"; the 448-bit
 * message; a million 'a'), and of the empty message (NIST's published
 * example value e3b0c442...b855), in pieces of awkward sizes, by the
 * portable code and, where the processor has them, the SHA instructions. */
START_TEST(sha256_fips_examples)
{
    static const struct { const char *text; long repeat; const char *digest; } cases[] = {
        { "abc", 1, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" },
        { "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq", 1,
          "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1" },
        { "a", 1000000, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0" },
        { "", 1, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855" },
    };
    char *buf = malloc(1000000);
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        size_t len = strlen(cases[i].text), total = len * (size_t)cases[i].repeat;
        for (size_t k = 0; k < total; k++)
            buf[k] = cases[i].text[k % (len ? len : 1)];
        for (int way = 0; way < 2; way++) {
            if (way == 1 && !sl__sha256_has_extensions())
                continue;
            sha256_ctx c;
            if (way == 0)
                sl__sha256_init_portable(&c);
            else
                sl__sha256_init(&c);
            for (size_t at = 0, piece = 1; at < total; at += piece, piece = piece * 3 + 1)
                sl__sha256_update(&c, buf + at, piece < total - at ? piece : total - at);
            unsigned char digest[32];
            char hex[65];
            sl__sha256_final(&c, digest);
            sl__sha256_hex(digest, hex);
            ck_assert_msg(strcmp(hex, cases[i].digest) == 0, "case %zu way %d: %s", i, way, hex);
        }
    }
    free(buf);
}
END_TEST

/* ---- the SQLite driver ---- */

/* An insert of one row with RETURNING id, run by the SQLite driver without
 * the clause (db_sqlite.c): the new rowid comes back as the one row, an
 * insert turned away by ON CONFLICT DO NOTHING gives none, the statement
 * can be reset and stepped again, and an insert of another shape keeps
 * SQLite's own RETURNING. */
START_TEST(driver_insert_returning_id)
{
    char *dir = sl_test_tmpdir();
    char *path = sl_test_path(dir, "driver.db");
    sl__db *db = NULL;
    ck_assert_int_eq(sl__db_open(&db, path), SL__DB_OK);
    ck_assert_int_eq(sl__db_exec(db, "CREATE TABLE t (id INTEGER PRIMARY KEY, name TEXT UNIQUE)"),
                     SL__DB_OK);
    sl__stmt *ins = NULL, *copy = NULL;
    ck_assert_int_eq(sl__db_prepare(db, "INSERT INTO t (name) VALUES (?1) ON CONFLICT DO NOTHING "
                                        "RETURNING id", 0, &ins), SL__DB_OK);
    const char *names[] = { "a", "b", "a", "c" };
    const long want[] = { 1, 2, 0, 3 }; /* 0: turned away */
    for (int i = 0; i < 4; i++) {
        sl__db_bind_text(ins, 1, names[i], -1);
        int rc = sl__db_step(ins);
        ck_assert_int_eq(rc, want[i] ? SL__DB_ROW : SL__DB_DONE);
        if (want[i]) {
            ck_assert_int_eq(sl__db_column_int64(ins, 0), want[i]);
            ck_assert(!sl__db_column_is_null(ins, 0));
            ck_assert_str_eq(sl__db_column_text(ins, 0), i == 3 ? "3" : i == 1 ? "2" : "1");
            ck_assert_int_eq(sl__db_step(ins), SL__DB_DONE);
        }
        sl__db_reset(ins);
    }
    ck_assert_int_eq(sl__db_prepare(db, "INSERT INTO t (name) SELECT name || 'x' FROM t "
                                        "WHERE id = 1 RETURNING id", 0, &copy), SL__DB_OK);
    ck_assert_int_eq(sl__db_step(copy), SL__DB_ROW);
    ck_assert_int_eq(sl__db_column_int64(copy, 0), 4);
    ck_assert_int_eq(sl__db_step(copy), SL__DB_DONE);
    sl__db_finalize(copy);
    /* two rows: SQLite's own RETURNING, a row for each */
    ck_assert_int_eq(sl__db_prepare(db, "INSERT INTO t (name) VALUES ('p'), ('q') RETURNING id", 0,
                                    &copy), SL__DB_OK);
    ck_assert_int_eq(sl__db_step(copy), SL__DB_ROW);
    ck_assert_int_eq(sl__db_column_int64(copy, 0), 5);
    ck_assert_int_eq(sl__db_step(copy), SL__DB_ROW);
    ck_assert_int_eq(sl__db_column_int64(copy, 0), 6);
    ck_assert_int_eq(sl__db_step(copy), SL__DB_DONE);
    sl__db_finalize(copy);
    sl__db_finalize(ins);
    sl__db_close(db);
    sl_test_rmtree(dir);
    free(path);
    free(dir);
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
    tcase_add_test(tc, measurements_reprobes_and_identity);
    tcase_add_test(tc, migration_from_version_3_keeps_every_device);
    tcase_add_test(tc, sha256_fips_examples);
    tcase_add_test(tc, constraint_failures_say_which);
    tcase_add_test(tc, failed_queries_are_errors);
    tcase_add_test(tc, import_constraint_failures_say_which);
    tcase_add_test(tc, far_dies_and_many_runs_keep_outcomes);
    tcase_add_test(tc, connection_lost_mid_copy_keeps_nothing);
    tcase_add_test(tc, staged_rows_clashing_with_stored_devices_refused);
    tcase_add_test(tc, staged_points_in_order);
    tcase_add_test(tc, old_raw_sweep_still_loads);
    tcase_add_test(tc, damaged_sweep_is_a_database_error);
    tcase_add_test(tc, damaged_staged_points_are_a_database_error);
    tcase_add_test(tc, scratch_keeps_ranks_and_reads_one_snapshot);
    tcase_add_test(tc, driver_insert_returning_id);
    tcase_add_test(tc, scratch_ranks_many_in_order);
    tcase_add_test(tc, sweeps_read_again_in_a_scratch);
    suite_add_tcase(s, tc);
    TCase *blob = tcase_create("sweep blob");
    tcase_set_timeout(blob, 300);
    tcase_add_test(blob, blob_round_trips_generated_sweeps);
    tcase_add_test(blob, blob_is_compact_for_a_csv_sweep);
    tcase_add_test(blob, blob_stores_meter_currents_as_quotients);
    tcase_add_test(blob, blob_quotient_falls_back_to_raw);
    tcase_add_test(blob, blob_memo_packs_as_without);
    tcase_add_test(blob, blob_even_steps);
    tcase_add_test(blob, blob_decimal_limits);
    tcase_add_test(blob, blob_pads_a_multiple_of_16);
    tcase_add_test(blob, blob_damage_is_named);
    tcase_add_test(blob, blob_truncated_or_mutated_never_crashes);
    suite_add_tcase(s, blob);
    return s;
}

int main(void) { return sl_test_main(store_suite()); }
