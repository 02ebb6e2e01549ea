/* SPDX-License-Identifier: MIT
 * Reliability of the splitlot binary under abuse: imports killed with SIGKILL,
 * a full disk, a file size limit, a read-only database, concurrent writers and
 * readers, hostile input files, and on PostgreSQL (make check-pg) a server
 * that stops mid-import, a statement timeout, an unreachable server, a
 * refused login (no password, a wrong one) and an unknown database. Each case checks the database afterwards (SQLite's
 * integrity check, earlier lots intact, no half-written lot).
 */
#define _GNU_SOURCE /* mount(2), umount2(2) */
#include <check.h>
#include <errno.h>
#include <fcntl.h>
#include <linux/fs.h>
#include <math.h>
#include <signal.h>
#include <sqlite3.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/ioctl.h>
#include <sys/mount.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "store_internal.h"
#include "test_support.h"

#define DEMO_PLAN SL_SOURCE_DIR "/plans/demo.yaml"
/* Generous bound for one child; the tests never assert on speed. */
#define CHILD_TIMEOUT_MS (240 * 1000)

/* ---- the shared rig: built once per test case ---- */

typedef struct {
    uint64_t hash;
    long devices;
} lot_digest;

static struct {
    char *dir;
    char *base_db;      /* EARLY-01 imported; DEMO-01 and LATE-01 planned only */
    char *small_csv;    /* a default-size simulated lot (fits every lot) */
    char *big_csv;      /* a large one, so an import takes a noticeable moment */
    lot_digest early;   /* EARLY-01 in base_db */
    lot_digest big;     /* DEMO-01 after a full import of big_csv */
} rig;

static char *rig_path(const char *name) { return sl_test_path(rig.dir, name); }

/* FNV-1a style mixing, a 64-bit word at a time (fast enough under valgrind). */
static void mix(uint64_t *h, const void *bytes, size_t n)
{
    const unsigned char *p = bytes;
    size_t i = 0;
    for (; i + 8 <= n; i += 8) {
        uint64_t w;
        memcpy(&w, p + i, sizeof w);
        *h = (*h ^ w) * 1099511628211ULL; /* FNV 64-bit prime */
    }
    for (; i < n; i++)
        *h = (*h ^ p[i]) * 1099511628211ULL;
}

/* Open a database through the store (SQLite: read-write, so a WAL left by a
 * killed process is recovered the way the next splitlot would). */
static sl_store *db_open(const char *path)
{
    sl_store *store = NULL;
    sl_diag *diag = sl_diag_new();
    sl_status s = sl_test_store_open(&store, path, diag);
    ck_assert_msg(s == SL_OK, "open %s: %s", path, sl_diag_last(diag) ? sl_diag_last(diag) : "?");
    sl_diag_free(diag);
    return store;
}

static void assert_integrity(const char *path)
{
    if (sl_test_pg()) /* the server keeps its own pages */
        return;
    sqlite3 *db = NULL;
    ck_assert_int_eq(sqlite3_open_v2(path, &db, SQLITE_OPEN_READWRITE, NULL), SQLITE_OK);
    sqlite3_busy_timeout(db, 60000);
    sqlite3_stmt *st = NULL;
    ck_assert_int_eq(sqlite3_prepare_v2(db, "PRAGMA integrity_check", -1, &st, NULL), SQLITE_OK);
    ck_assert_int_eq(sqlite3_step(st), SQLITE_ROW);
    ck_assert_str_eq((const char *)sqlite3_column_text(st, 0), "ok");
    sqlite3_finalize(st);
    sqlite3_close(db);
}

/* Device count and a hash of every stored column of a lot's devices and sweeps
 * (row ids left out), in wafer and device order. */
static lot_digest digest_lot(const char *path, const char *lot)
{
    static const char sql[] =
        "SELECT d.wafer, d.name, d.die_x, d.die_y, m.source, m.fit_class, m.temperature_K, "
        "m.cnp_V, m.cnp_sigma_V, m.mobility_cm2_per_Vs, m.n0_per_cm2, m.r_contact_ohm, "
        "m.rel_rms, m.r_squared, m.n_points, s.n_points, s.points "
        "FROM measurement_view m JOIN device d ON d.id = m.device_id JOIN lot l ON l.id = d.lot_id "
        "LEFT JOIN sweep s ON s.measurement_id = m.id WHERE l.name = ?1 AND m.current "
        "ORDER BY d.wafer, d.name, m.step, m.temperature_K";
    lot_digest dg = { 14695981039346656037ULL, 0 }; /* FNV-1a offset basis */
    sl_store *store = db_open(path);
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(store->db, sql, 0, &st), SL__DB_OK);
    sl__db_bind_text(st, 1, lot, -1);
    int rc;
    while ((rc = sl__db_step(st)) == SL__DB_ROW) {
        for (int i = 0; i < 17; i++) {
            const void *b = i == 16 ? sl__db_column_blob(st, i) : sl__db_column_text(st, i);
            mix(&dg.hash, b ? b : "", b ? sl__db_column_bytes(st, i) : 0);
            mix(&dg.hash, "|", 1);
        }
        dg.devices++;
    }
    ck_assert_int_eq(rc, SL__DB_DONE);
    sl__db_finalize(st);
    sl_store_close(store);
    return dg;
}

static void assert_same_lot(lot_digest got, lot_digest want, const char *what)
{
    ck_assert_msg(got.devices == want.devices && got.hash == want.hash,
                  "%s: %ld devices (hash %016llx), expected %ld (%016llx)", what, got.devices,
                  (unsigned long long)got.hash, want.devices, (unsigned long long)want.hash);
}

/* Run splitlot in the rig folder; it must succeed. */
static void run_ok(const char *const *argv)
{
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    ck_assert_msg(r.exit_code == 0, "%s: exit %d: %s", argv[0], r.exit_code, r.err);
    sl_run_result_free(&r);
}

/* The demo plan under another lot name, written into the rig folder. */
static void write_plan_as(const char *name, const char *lot)
{
    char *text = sl_test_read_file(DEMO_PLAN, NULL);
    ck_assert_ptr_nonnull(text);
    char *at = strstr(text, "lot: DEMO-01\n");
    ck_assert_ptr_nonnull(at);
    char *path = rig_path(name);
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    fprintf(f, "%.*slot: %s\n%s", (int)(at - text), text, lot, at + strlen("lot: DEMO-01\n"));
    ck_assert_int_eq(fclose(f), 0);
    free(path);
    free(text);
}

static void ingest_ok(const char *db, const char *lot, const char *csv)
{
    const char *argv[] = { "ingest", "--lot", lot, "--sweeps", csv, "--db", db, NULL };
    run_ok(argv);
}

static void predict_ok(const char *plan, const char *db)
{
    const char *argv[] = { "predict", plan, "--db", db, NULL };
    run_ok(argv);
}

static void rig_setup(void)
{
    rig.dir = sl_test_tmpdir();
    ck_assert_ptr_nonnull(rig.dir);
    write_plan_as("early.yaml", "EARLY-01");
    write_plan_as("late.yaml", "LATE-01");
    predict_ok("early.yaml", "base.db");
    predict_ok(DEMO_PLAN, "base.db");
    predict_ok("late.yaml", "base.db");
    /* the three plans differ only in the lot name: their sweeps fit any lot */
    const char *small[] = { "simulate", "early.yaml", "--out", "small", "--points", "41", NULL };
    const char *big[] = { "simulate", DEMO_PLAN, "--out", "big", "--devices-per-wafer", "300",
                          "--points", "101", NULL };
    run_ok(small);
    run_ok(big);
    rig.base_db = rig_path("base.db");
    rig.small_csv = rig_path("small/sweeps.csv");
    rig.big_csv = rig_path("big/sweeps.csv");
    ingest_ok("base.db", "EARLY-01", "small/sweeps.csv");
    rig.early = digest_lot(rig.base_db, "EARLY-01");
    char *ref = rig_path("ref.db");
    ck_assert_int_eq(sl_test_copy_file(rig.base_db, ref), 0);
    ingest_ok("ref.db", "DEMO-01", "big/sweeps.csv");
    rig.big = digest_lot(ref, "DEMO-01");
    free(ref);
    ck_assert_int_gt(rig.early.devices, 100);
    ck_assert_int_gt(rig.big.devices, 2000);
}

static void rig_teardown(void)
{
    sl_test_rmtree(rig.dir);
    free(rig.dir);
    free(rig.base_db);
    free(rig.small_csv);
    free(rig.big_csv);
    memset(&rig, 0, sizeof rig);
}

/* A private copy of the base database in the rig folder (malloc'd path). */
static char *work_db(const char *name)
{
    char *db = rig_path(name);
    ck_assert_int_eq(sl_test_copy_file(rig.base_db, db), 0);
    return db;
}

static long file_size(const char *path)
{
    struct stat sb;
    return stat(path, &sb) == 0 ? (long)sb.st_size : -1;
}

static size_t count_lines(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

/* ---- children driven by hand: kill, limits, several at once ---- */

typedef struct {
    pid_t pid;
    char *err_path;     /* the child's stderr */
    int status;         /* as from waitpid, once reaped */
} child;

/* Start splitlot in the rig folder, stdout discarded, stderr to a file named
 * after tag; fsize_limit > 0 sets RLIMIT_FSIZE (with SIGXFSZ ignored, so a
 * write past it fails with EFBIG instead of killing the process). */
static child spawn(const char *const *argv, const char *tag, rlim_t fsize_limit)
{
    child c = { -1, rig_path(tag), 0 };
    size_t argc = 0;
    while (argv[argc])
        argc++;
    const char **args = calloc(argc + 2, sizeof *args);
    args[0] = SL_BINARY;
    memcpy(args + 1, argv, argc * sizeof *argv);
    char *mapped = NULL; /* a database file names a schema of the test server */
    for (size_t i = 1; i < argc; i++)
        if (strcmp(argv[i - 1], "--db") == 0)
            args[i + 1] = mapped = sl_test_db_in(rig.dir, argv[i]);
    c.pid = fork();
    if (c.pid == 0) {
        int err = open(c.err_path, O_WRONLY | O_CREAT | O_TRUNC, 0644);
        int null = open("/dev/null", O_RDWR);
        if (err < 0 || null < 0 || chdir(rig.dir) != 0)
            _exit(126);
        dup2(null, 0);
        dup2(null, 1);
        dup2(err, 2);
        if (fsize_limit > 0) {
            struct rlimit rl = { fsize_limit, fsize_limit };
            signal(SIGXFSZ, SIG_IGN);
            if (setrlimit(RLIMIT_FSIZE, &rl) != 0)
                _exit(125);
        }
        execv(SL_BINARY, (char *const *)args);
        _exit(127);
    }
    free(args);
    free(mapped);
    ck_assert_int_gt(c.pid, 0);
    return c;
}

static void sleep_ms(long ms)
{
    struct timespec ts = { ms / 1000, (ms % 1000) * 1000000L };
    while (nanosleep(&ts, &ts) != 0 && errno == EINTR)
        ;
}

/* Wait up to limit_ms for the child; 1 when it has ended (status set). */
static int reap_within(child *c, long limit_ms)
{
    for (long waited = 0;; waited += 5) {
        pid_t got = waitpid(c->pid, &c->status, WNOHANG);
        if (got == c->pid)
            return 1;
        ck_assert_int_eq(got, 0);
        if (waited >= limit_ms)
            return 0;
        sleep_ms(5);
    }
}

/* Exit code, or 128 + signal, as a shell reports it. */
static int exit_code(const child *c)
{
    return WIFEXITED(c->status) ? WEXITSTATUS(c->status) : 128 + WTERMSIG(c->status);
}

static int wait_child(child *c)
{
    if (!reap_within(c, CHILD_TIMEOUT_MS)) {
        kill(c->pid, SIGKILL);
        waitpid(c->pid, &c->status, 0);
        ck_abort_msg("splitlot did not finish within %d s", CHILD_TIMEOUT_MS / 1000);
    }
    return exit_code(c);
}

/* The child's stderr (malloc'd), and its file removed. */
static char *child_err(child *c)
{
    char *text = sl_test_read_file(c->err_path, NULL);
    unlink(c->err_path);
    free(c->err_path);
    c->err_path = NULL;
    return text ? text : strdup("");
}

/* ---- killed imports ---- */

/* Let an import of the big lot run for delay_ms, then SIGKILL it. Returns 1
 * when it was killed, 0 when it had already finished (successfully). */
static int import_killed_after(const char *db, long delay_ms)
{
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.big_csv, "--db", db,
                           NULL };
    child c = spawn(argv, "kill.err", 0);
    if (!reap_within(&c, delay_ms)) {
        kill(c.pid, SIGKILL);
        ck_assert_int_eq(waitpid(c.pid, &c.status, 0), c.pid);
    }
    char *err = child_err(&c);
    int killed = WIFSIGNALED(c.status) && WTERMSIG(c.status) == SIGKILL;
    ck_assert_msg(killed || exit_code(&c) == 0, "import exit %d: %s", exit_code(&c), err);
    free(err);
    return killed;
}

START_TEST(kill_during_import_keeps_database_whole)
{
    /* time-based kill points: the assertion is integrity, never speed */
    static const long delays_ms[] = { 10, 40, 100, 200, 400 };
    char *db = work_db("kill.db");
    int killed = 0, complete = 0;
    for (size_t i = 0; i < sizeof delays_ms / sizeof delays_ms[0]; i++) {
        int k = import_killed_after(db, delays_ms[i]);
        killed += k;
        complete = complete || !k;
        assert_integrity(db);
        assert_same_lot(digest_lot(db, "EARLY-01"), rig.early, "earlier lot after a kill");
        lot_digest demo = digest_lot(db, "DEMO-01");
        /* all or nothing: a kill that lands after the commit (the process
         * still tearing down) leaves the whole import, and a killed re-probe
         * the whole earlier one current; never part of a lot */
        if (complete || demo.devices != 0)
            assert_same_lot(demo, rig.big, "imported lot after a kill");
        complete = complete || demo.devices != 0;
    }
    ck_assert_msg(killed >= 2, "only %d of the imports were interrupted", killed);
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.big_csv, "--db", db,
                           NULL };
    run_ok(argv);
    assert_integrity(db);
    assert_same_lot(digest_lot(db, "DEMO-01"), rig.big, "full import after the kills");
    assert_same_lot(digest_lot(db, "EARLY-01"), rig.early, "earlier lot at the end");
    free(db);
}
END_TEST

/* ---- full disk, size limit, read-only ---- */

/* A fresh tmpfs of size_kib at dir; 0 on success, else errno (then the
 * caller skips: mounting needs root or CAP_SYS_ADMIN). */
static int mount_tmpfs(const char *dir, long size_kib)
{
    char opts[64];
    snprintf(opts, sizeof opts, "size=%ldk,mode=0755", size_kib);
    if (mkdir(dir, 0755) != 0 && errno != EEXIST)
        return errno;
    return mount("tmpfs", dir, "tmpfs", 0, opts) == 0 ? 0 : errno;
}

/* Reported to ctest as skipped (these cases run as test_reliability_root). */
static void skip_note(const char *test, const char *why, int err)
{
    char text[256];
    snprintf(text, sizeof text, "%s (%s)", why, strerror(err));
    sl_test_skip(test, text);
}

/* Copy a database (and its WAL, if one was left) out of dir to the rig
 * folder as name, so it can be checked after the mount is gone. */
static char *copy_out(const char *db, const char *name)
{
    char *to = rig_path(name);
    ck_assert_int_eq(sl_test_copy_file(db, to), 0);
    char wal[4096], to_wal[4096];
    snprintf(wal, sizeof wal, "%s-wal", db);
    snprintf(to_wal, sizeof to_wal, "%s-wal", to);
    unlink(to_wal);
    if (access(wal, F_OK) == 0)
        ck_assert_int_eq(sl_test_copy_file(wal, to_wal), 0);
    return to;
}

/* An import of the big lot that must fail with exit 1 and one clear line,
 * leaving the earlier lot whole and nothing of the new one. */
static void assert_refused_cleanly(int code, const char *err, const char *db, const char *needle)
{
    ck_assert_msg(code == 1, "exit %d, stderr: %s", code, err);
    ck_assert_msg(strstr(err, needle) && strstr(err, "nothing was changed"), "stderr: %s", err);
    ck_assert_msg(count_lines(err) == 1, "stderr: %s", err);
    assert_integrity(db);
    assert_same_lot(digest_lot(db, "EARLY-01"), rig.early, "earlier lot");
    ck_assert_int_eq(digest_lot(db, "DEMO-01").devices, 0);
}

static int import_big_into(const char *db, rlim_t fsize_limit, char **err)
{
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.big_csv, "--db", db, NULL };
    child c = spawn(argv, "limit.err", fsize_limit);
    int code = wait_child(&c);
    *err = child_err(&c);
    return code;
}

START_TEST(full_disk_refused_cleanly)
{
    SL_TEST_SQLITE_ONLY(); /* the file system under an SQLite file */
    char *mnt = rig_path("full");
    long kib = file_size(rig.base_db) / 1024 + 512; /* room for the start, not the lot */
    int e = mount_tmpfs(mnt, kib);
    if (e != 0) {
        skip_note("full_disk_refused_cleanly", "cannot mount a small tmpfs", e);
        free(mnt);
        return;
    }
    char *db = sl_test_path(mnt, "t.db");
    int copied = sl_test_copy_file(rig.base_db, db);
    char *err = NULL;
    int code = copied == 0 ? import_big_into(db, 0, &err) : -1;
    char *out = copied == 0 ? copy_out(db, "full-after.db") : NULL;
    umount2(mnt, MNT_DETACH);
    ck_assert_int_eq(copied, 0);
    assert_refused_cleanly(code, err, out, "disk full");
    free(err);
    free(out);
    free(db);
    free(mnt);
}
END_TEST

/* The small lot with one bad r_ohm in every fiftieth row: with
 * --keep-going about half its devices are rejected. */
static char *write_half_bad_csv(void)
{
    char *text = sl_test_read_file(rig.small_csv, NULL);
    ck_assert_ptr_nonnull(text);
    char *path = rig_path("half-bad.csv");
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    long line = 0;
    for (char *p = text; *p;) {
        char *nl = strchr(p, '\n');
        size_t n = nl ? (size_t)(nl - p) : strlen(p);
        size_t at = 0, end, commas = 0; /* the sixth field, r_ohm */
        while (at < n && commas < 5)
            commas += p[at++] == ',';
        for (end = at; end < n && p[end] != ',';)
            end++;
        if (++line % 50 == 0 && commas == 5)
            fprintf(f, "%.*sbad%.*s\n", (int)at, p, (int)(n - end), p + end);
        else
            fprintf(f, "%.*s\n", (int)n, p);
        p += n + (nl != NULL);
    }
    ck_assert_int_eq(fclose(f), 0);
    free(text);
    return path;
}

/* --keep-going with the rejects file on a full disk: the import fails with
 * exit 1 and leaves the database as it was (the good devices are not kept
 * without their rejects) and no half-written rejects file. */
START_TEST(rejects_on_full_disk_leave_database_unchanged)
{
    char *mnt = rig_path("rejects-full");
    int e = mount_tmpfs(mnt, 64);
    if (e != 0) {
        skip_note("rejects_on_full_disk_leave_database_unchanged", "cannot mount a small tmpfs", e);
        free(mnt);
        return;
    }
    char *db = work_db("rejects.db");
    char *bad = write_half_bad_csv();
    char *rejects = sl_test_path(mnt, "rejects.csv");
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", bad, "--db", db,
                           "--keep-going", "--rejects", rejects, NULL };
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    int left = access(rejects, F_OK) == 0;
    umount2(mnt, MNT_DETACH);
    ck_assert_msg(r.exit_code == 1, "exit %d: %s", r.exit_code, r.err);
    ck_assert_msg(strstr(r.err, "cannot write the rejects file"), "stderr: %s", r.err);
    ck_assert_msg(!left, "a half-written rejects file was left");
    assert_integrity(db);
    assert_same_lot(digest_lot(db, "EARLY-01"), rig.early, "earlier lot");
    ck_assert_int_eq(digest_lot(db, "DEMO-01").devices, 0);
    /* the same import with room for the rejects keeps the good devices */
    char *room = rig_path("rejects.csv");
    const char *again[] = { "ingest", "--lot", "DEMO-01", "--sweeps", bad, "--db", db,
                            "--keep-going", "--rejects", room, NULL };
    sl_run_result_free(&r);
    r = sl_test_run(rig.dir, NULL, again);
    ck_assert_msg(r.exit_code == 0, "exit %d: %s", r.exit_code, r.err);
    long stored = digest_lot(db, "DEMO-01").devices;
    ck_assert_msg(stored > 0 && file_size(room) > 64 * 1024, "%ld devices, rejects %ld bytes",
                  stored, file_size(room));
    sl_run_result_free(&r);
    free(room);
    free(rejects);
    free(bad);
    free(db);
    free(mnt);
}
END_TEST

START_TEST(file_size_limit_refused_cleanly)
{
    SL_TEST_SQLITE_ONLY(); /* the file system under an SQLite file */
    char *db = work_db("fsize.db");
    rlim_t limit = (rlim_t)file_size(db) + 1024 * 1024;
    char *err = NULL;
    int code = import_big_into(db, limit, &err);
    assert_refused_cleanly(code, err, db, "disk I/O error");
    free(err);
    free(db);
}
END_TEST

/* An import into a read-only database: exit 1, one line saying read-only. */
static void assert_read_only_refused(const char *db, const char *what)
{
    const char *argv[] = { "ingest", "--lot", "LATE-01", "--sweeps", rig.small_csv, "--db", db,
                           NULL };
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    ck_assert_msg(r.exit_code == 1, "%s: exit %d: %s", what, r.exit_code, r.err);
    ck_assert_msg(strstr(r.err, "read-only") && count_lines(r.err) == 1, "%s: %s", what, r.err);
    sl_run_result_free(&r);
}

START_TEST(read_only_file_system_refused)
{
    SL_TEST_SQLITE_ONLY(); /* the file system under an SQLite file */
    char *mnt = rig_path("ro");
    int e = mount_tmpfs(mnt, 65536);
    if (e != 0) {
        skip_note("read_only_file_system_refused", "cannot mount a tmpfs", e);
        free(mnt);
        return;
    }
    char *db = sl_test_path(mnt, "t.db");
    int copied = sl_test_copy_file(rig.base_db, db);
    int ro = mount("tmpfs", mnt, "tmpfs", MS_REMOUNT | MS_RDONLY, NULL) == 0 ? 0 : errno;
    if (copied == 0 && ro == 0)
        assert_read_only_refused(db, "read-only tmpfs");
    int same = sl_test_files_equal(db, rig.base_db);
    umount2(mnt, MNT_DETACH);
    ck_assert_int_eq(copied, 0);
    ck_assert_msg(ro == 0, "remount read-only: %s", strerror(ro));
    ck_assert(same);
    free(db);
    free(mnt);
}
END_TEST

/* chattr +i through the ioctl: even root cannot write the file then. */
static int set_immutable(const char *path, int on)
{
    int fd = open(path, O_RDONLY);
    if (fd < 0)
        return errno;
    int flags = 0, rc = ioctl(fd, FS_IOC_GETFLAGS, &flags);
    if (rc == 0) {
        flags = on ? (flags | FS_IMMUTABLE_FL) : (flags & ~FS_IMMUTABLE_FL);
        rc = ioctl(fd, FS_IOC_SETFLAGS, &flags);
    }
    int e = rc == 0 ? 0 : errno;
    close(fd);
    return e;
}

START_TEST(immutable_database_refused)
{
    SL_TEST_SQLITE_ONLY(); /* the file system under an SQLite file */
    char *db = work_db("immutable.db");
    int e = set_immutable(db, 1);
    if (e != 0) {
        skip_note("immutable_database_refused", "cannot set the immutable flag", e);
        free(db);
        return;
    }
    const char *argv[] = { "ingest", "--lot", "LATE-01", "--sweeps", rig.small_csv, "--db", db,
                           NULL };
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    set_immutable(db, 0);
    ck_assert_msg(r.exit_code == 1, "exit %d: %s", r.exit_code, r.err);
    ck_assert_msg(strstr(r.err, "read-only") && strstr(r.err, "nothing was changed") &&
                  count_lines(r.err) == 1, "%s", r.err);
    ck_assert(sl_test_files_equal(db, rig.base_db));
    sl_run_result_free(&r);
    free(db);
}
END_TEST

/* ---- several commands at once ---- */

/* Ended on its own, and either succeeded or said why on stderr. */
static void assert_clean_end(const child *c, const char *err, const char *what)
{
    int code = exit_code(c);
    ck_assert_msg(code == 0 || ((code == 1 || code == 2) && err[0] != '\0'),
                  "%s: exit %d, stderr: %s", what, code, err);
}

START_TEST(concurrent_imports_and_compare)
{
    char *db = work_db("busy.db");
    const char *big[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.big_csv, "--db", db, NULL };
    const char *late[] = { "ingest", "--lot", "LATE-01", "--sweeps", rig.small_csv, "--db", db,
                           NULL };
    const char *cmp[] = { "compare", "--lot", "EARLY-01", "--db", db, "--format", "csv", NULL };
    child c[4] = { spawn(big, "busy0.err", 0), spawn(big, "busy1.err", 0),
                   spawn(late, "busy2.err", 0), spawn(cmp, "busy3.err", 0) };
    char *err[4];
    for (int i = 0; i < 4; i++) {
        wait_child(&c[i]);
        err[i] = child_err(&c[i]);
        assert_clean_end(&c[i], err[i], i < 2 ? "DEMO-01 import" : i == 2 ? "LATE-01 import"
                                                                       : "compare");
    }
    /* both DEMO-01 imports are runs of their own, one after the other (the
     * later a re-probe of the same devices), unless one gives up waiting,
     * saying the database is busy */
    int wins = (exit_code(&c[0]) == 0) + (exit_code(&c[1]) == 0);
    ck_assert_int_ge(wins, 1);
    for (int i = 0; i < 2; i++)
        ck_assert_msg(exit_code(&c[i]) == 0 || strstr(err[i], "busy"), "%s", err[i]);
    ck_assert_msg(exit_code(&c[3]) == 0, "compare: %s", err[3]);
    assert_integrity(db);
    assert_same_lot(digest_lot(db, "EARLY-01"), rig.early, "earlier lot");
    assert_same_lot(digest_lot(db, "DEMO-01"), rig.big, "DEMO-01");
    long late_devices = digest_lot(db, "LATE-01").devices;
    ck_assert(late_devices == (exit_code(&c[2]) == 0 ? rig.early.devices : 0));
    for (int i = 0; i < 4; i++)
        free(err[i]);
    free(db);
}
END_TEST

/* ---- hostile input ---- */

typedef struct {
    const char *name;      /* file written in the rig folder */
    const char *kind;      /* "results" or "sweeps" */
    const char *text;      /* content; NULL: built by the test */
    size_t len;            /* bytes of text (they may hold NUL) */
    long line;             /* line the one error must name */
    const char *fragment;  /* part of the message */
} hostile_case;

#define RESULTS_HEADER "wafer,device,die_x,die_y,v_cnp_V\n"
#define SWEEPS_HEADER "wafer,device,die_x,die_y,vg_V,r_ohm\n"
#define CASE(name, kind, text, line, fragment) { name, kind, text, sizeof(text) - 1, line, fragment }

static const hostile_case hostile[] = {
    { "h-long.csv", "results", NULL, 0, 3, "record longer than" },
    CASE("h-nul.csv", "results", RESULTS_HEADER "W01,D001,0,0,0.5\nW01,D0\0002,1,0,0.5\n", 3,
         "NUL byte"),
    CASE("h-utf8.csv", "results", RESULTS_HEADER "W01,D\xc3\x28,0,0,0.5\n", 2, "not valid UTF-8"),
    CASE("h-overlong.csv", "results", RESULTS_HEADER "W01,\xc0\xaf" "D1,0,0,0.5\n", 2,
         "not valid UTF-8"),
    CASE("h-huge.csv", "results", RESULTS_HEADER "W01,D001,0,0,1e999\n", 2, "out of range"),
    CASE("h-nan.csv", "results", RESULTS_HEADER "W01,D001,0,0,0.5\nW01,D002,1,0,NaN\n", 3,
         "bad number"),
    CASE("h-inf.csv", "sweeps", SWEEPS_HEADER "W01,D001,0,0,-inf,1000\n", 2, "bad number"),
    CASE("h-tiny.csv", "sweeps", SWEEPS_HEADER "W01,D001,0,0,1,1e-999\n", 2, "out of range"),
    CASE("h-dup.csv", "results", "wafer,device,die_x,die_y,v_cnp_V,device\nW01,D1,0,0,0,D2\n", 1,
         "duplicate column"),
    CASE("h-header.csv", "results", RESULTS_HEADER, 1, "no data rows"),
    CASE("h-fields.csv", "sweeps", SWEEPS_HEADER "W01,D001,0,0,1,1000,9\n", 2,
         "expected 6 fields"),
};

/* The text of a case: a data line of two MiB for the long-line case. */
static char *hostile_text(const hostile_case *h, size_t *len)
{
    if (h->text) {
        *len = h->len;
        char *t = malloc(h->len);
        memcpy(t, h->text, h->len);
        return t;
    }
    size_t big = 2u * 1024u * 1024u;
    const char *head = RESULTS_HEADER "W01,D001,0,0,0.5\nW01,D002,1,0,";
    size_t n = strlen(head);
    char *t = malloc(n + big + 1);
    memcpy(t, head, n);
    memset(t + n, '7', big);
    t[n + big] = '\n';
    *len = n + big + 1;
    return t;
}

static void write_bytes(const char *path, const char *bytes, size_t len)
{
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    ck_assert_uint_eq(fwrite(bytes, 1, len, f), len);
    ck_assert_int_eq(fclose(f), 0);
}

START_TEST(hostile_file_refused_at_its_line)
{
    const hostile_case *h = &hostile[_i];
    char *db = work_db("hostile.db");
    char *path = rig_path(h->name);
    size_t len;
    char *text = hostile_text(h, &len);
    write_bytes(path, text, len);
    char opt[16];
    snprintf(opt, sizeof opt, "--%s", h->kind);
    const char *argv[] = { "ingest", "--lot", "DEMO-01", opt, h->name, "--db", db, NULL };
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    char where[128];
    snprintf(where, sizeof where, "%s:%ld:", h->name, h->line);
    ck_assert_msg(r.exit_code == 2, "%s: exit %d: %s", h->name, r.exit_code, r.err);
    ck_assert_msg(strncmp(r.err, where, strlen(where)) == 0 && strstr(r.err, h->fragment) &&
                  count_lines(r.err) == 1, "%s: %s", h->name, r.err);
    ck_assert_msg(sl_test_files_equal(db, rig.base_db), "%s changed the database", h->name);
    sl_run_result_free(&r);
    free(text);
    free(path);
    free(db);
}
END_TEST

typedef struct {
    const char *name, *text;
    long line;
} plan_case;

static const plan_case self_referencing_plans[] = {
    { "p-self-seq.yaml", "lot: &a [x, *a]\n", 1 },
    { "p-self-map.yaml", "lot: DEMO-01\nmaterials: &m\n  - name: x\n    more: *m\n", 4 },
    { "p-self-merge.yaml", "lot: DEMO-01\ngraphene: &g\n  <<: *g\n", 3 },
};

START_TEST(self_referencing_plan_refused)
{
    const plan_case *p = &self_referencing_plans[_i];
    char *path = rig_path(p->name);
    ck_assert_int_eq(sl_test_write_file(path, p->text), 0);
    char *db = work_db("plan.db");
    const char *check[] = { "check", p->name, NULL };
    const char *predict[] = { "predict", p->name, "--db", db, NULL };
    const char *const *argvs[] = { check, predict };
    char where[128];
    snprintf(where, sizeof where, "%s:%ld:", p->name, p->line);
    for (int i = 0; i < 2; i++) {
        sl_run_result r = sl_test_run(rig.dir, NULL, argvs[i]);
        ck_assert_msg(r.exit_code == 2, "%s: exit %d: %s", p->name, r.exit_code, r.err);
        ck_assert_msg(strncmp(r.err, where, strlen(where)) == 0 && strstr(r.err, "alias") &&
                      count_lines(r.err) == 1, "%s: %s", p->name, r.err);
        sl_run_result_free(&r);
    }
    ck_assert(sl_test_files_equal(db, rig.base_db));
    free(db);
    free(path);
}
END_TEST

/* -0 and a subnormal are numbers like any other: the file imports and the
 * values are stored as written. */
START_TEST(negative_zero_and_subnormal_import)
{
    char *db = work_db("numbers.db");
    char *path = rig_path("numbers.csv");
    ck_assert_int_eq(sl_test_write_file(path, "wafer,device,die_x,die_y,v_cnp_V,mobility_cm2_per_Vs\n"
                                              "W01,D001,0,0,-0,1e-320\n"
                                              "W01,D002,1,0,1e-320,-0.0\n"), 0);
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--results", "numbers.csv", "--db", db,
                           NULL };
    run_ok(argv);
    sl_store *s = db_open(db);
    sl__stmt *st = NULL;
    ck_assert_int_eq(sl__db_prepare(s->db, "SELECT cnp_V, mobility_cm2_per_Vs FROM measurement m "
                                           "JOIN device d ON d.id = m.device_id JOIN lot l ON "
                                           "l.id = d.lot_id WHERE l.name = 'DEMO-01' ORDER BY d.name",
                                    0, &st), SL__DB_OK);
    double want[2][2] = { { 0.0, 1e-320 }, { 1e-320, 0.0 } };
    for (int i = 0; i < 2; i++) {
        ck_assert_int_eq(sl__db_step(st), SL__DB_ROW);
        ck_assert(sl__db_column_double(st, 0) == want[i][0]);
        ck_assert(sl__db_column_double(st, 1) == want[i][1]);
    }
    ck_assert_int_eq(sl__db_step(st), SL__DB_DONE);
    sl__db_finalize(st);
    sl_store_close(s);
    assert_integrity(db);
    free(path);
    free(db);
}
END_TEST

/* ---- a PostgreSQL server that fails (make check-pg) ---- */

/* Run a shell command as the server's owner (postgres when we are root). */
static int as_server_owner(const char *cmd)
{
    char line[8400];
    if (geteuid() == 0)
        snprintf(line, sizeof line, "runuser -u postgres -- sh -c '%s' >/dev/null 2>&1", cmd);
    else
        snprintf(line, sizeof line, "sh -c '%s' >/dev/null 2>&1", cmd);
    return system(line);
}

typedef struct {
    char dir[1024]; /* a folder under the rig's temporary one */
    char url[1200];
} private_server;

static int server_start(private_server *srv)
{
    char cmd[8192];
    snprintf(cmd, sizeof cmd, "%s/pg_ctl -D %s/data -l %s/log -w -t 30 -o \"-k %s -c "
             "listen_addresses= -c fsync=off\" start", getenv("SL_PG_BINDIR"), srv->dir, srv->dir,
             srv->dir);
    return as_server_owner(cmd);
}

static void server_stop(private_server *srv, const char *mode)
{
    char cmd[8192];
    snprintf(cmd, sizeof cmd, "%s/pg_ctl -D %s/data -m %s -w stop", getenv("SL_PG_BINDIR"),
             srv->dir, mode);
    as_server_owner(cmd);
}

/* Put a line first in the server's pg_hba.conf (the first match decides). */
static int hba_put_first(const private_server *srv, const char *rule)
{
    char path[1100];
    snprintf(path, sizeof path, "%s/data/pg_hba.conf", srv->dir);
    size_t n = 0;
    char *old = sl_test_read_file(path, &n);
    FILE *f = old ? fopen(path, "w") : NULL; /* truncated in place: its owner stays */
    int ok = f && fprintf(f, "%s\n", rule) > 0 && fwrite(old, 1, n, f) == n;
    ok = f && fclose(f) == 0 && ok;
    free(old);
    return ok ? 0 : -1;
}

/* A server of this test's own in the rig's folder name (it is stopped, or
 * its logins ruled by hba_first, a pg_hba.conf line put first, or NULL,
 * which the other suites' server must not be), with a database for
 * splitlot. 0 when it runs. */
static int server_make(private_server *srv, const char *name, const char *hba_first)
{
    const char *user = geteuid() == 0 ? "postgres" : getenv("USER");
    snprintf(srv->dir, sizeof srv->dir, "%s/", rig.dir);
    strncat(srv->dir, name, sizeof srv->dir - strlen(srv->dir) - 1);
    ck_assert_int_eq(mkdir(srv->dir, 0700), 0);
    char cmd[8192];
    if (geteuid() == 0) {
        snprintf(cmd, sizeof cmd, "chown postgres: %s && chmod 755 %s", srv->dir, rig.dir);
        ck_assert_int_eq(system(cmd), 0);
    }
    snprintf(cmd, sizeof cmd, "%s/initdb -D %s/data -A trust -U %s --no-locale -E UTF8",
             getenv("SL_PG_BINDIR"), srv->dir, user ? user : "postgres");
    if (as_server_owner(cmd) != 0 || (hba_first && hba_put_first(srv, hba_first) != 0) ||
        server_start(srv) != 0)
        return -1;
    snprintf(cmd, sizeof cmd, "%s/createdb -h %s -U %s lots", getenv("SL_PG_BINDIR"), srv->dir,
             user ? user : "postgres");
    if (as_server_owner(cmd) != 0)
        return -1;
    snprintf(srv->url, sizeof srv->url, "postgresql:///lots?host=%s&user=%s", srv->dir,
             user ? user : "postgres");
    return 0;
}

/* 1 once an import holds a lot's lock on the server (it is writing). */
static int import_under_way(const char *url)
{
    sl_store *store = db_open(url);
    sl__stmt *st = NULL;
    long n = 0;
    if (sl__db_prepare(store->db, "SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' "
                                  "AND objsubid = 2 AND objid <> 0 AND granted", 0, &st) == SL__DB_OK &&
        sl__db_step(st) == SL__DB_ROW)
        n = (long)sl__db_column_int64(st, 0);
    sl__db_finalize(st);
    sl_store_close(store);
    return n > 0;
}

/* The server stopped while an import writes: the import ends with exit 1
 * and one line naming the lost server; after a restart nothing of the lot
 * is there and the earlier lot is whole. */
START_TEST(server_stopped_mid_import)
{
    if (!sl_test_pg() || !getenv("SL_PG_BINDIR"))
        return;
    private_server srv;
    ck_assert_msg(server_make(&srv, "pg", NULL) == 0,
                  "the test's own PostgreSQL server did not start");
    predict_ok("early.yaml", srv.url);
    predict_ok(DEMO_PLAN, srv.url);
    ingest_ok(srv.url, "EARLY-01", "small/sweeps.csv");
    lot_digest early = digest_lot(srv.url, "EARLY-01");
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.big_csv, "--db", srv.url,
                           NULL };
    child c = spawn(argv, "stop.err", 0);
    int seen = 0;
    for (int i = 0; i < 2000 && !seen && !reap_within(&c, 10); i++)
        seen = import_under_way(srv.url);
    ck_assert_msg(seen, "the import ended before it was seen writing");
    sleep_ms(100);
    server_stop(&srv, "fast");
    int code = wait_child(&c);
    char *err = child_err(&c);
    ck_assert_msg(code == 1 && count_lines(err) == 1 &&
                  strstr(err, "cannot be reached or closed the connection"), "exit %d: %s", code, err);
    ck_assert_int_eq(server_start(&srv), 0);
    assert_same_lot(digest_lot(srv.url, "EARLY-01"), early, "earlier lot after the restart");
    ck_assert_int_eq(digest_lot(srv.url, "DEMO-01").devices, 0);
    server_stop(&srv, "immediate");
    free(err);
}
END_TEST

/* A statement past the server's statement_timeout (here the wait for a lot
 * another client holds), an unreachable server and a refused login: exit 1,
 * one line saying which, nothing written. */
START_TEST(server_failures_are_one_clear_line)
{
    if (!sl_test_pg())
        return;
    char *db = work_db("timeout.db");
    sl_store *holder = db_open(db);
    sl_store_lot lot;
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(sl_store_find_lot(holder, &lot, "DEMO-01", diag), SL_OK);
    ck_assert_int_eq(sl_store_begin(holder, diag), SL_OK);
    ck_assert_int_eq(sl__store_lock_lot(holder, lot.lot_id, diag), SL_OK);
    /* the test URL's options (its schema) and a 300 ms statement_timeout */
    char *url = sl_test_db(db), timed[4300];
    snprintf(timed, sizeof timed, "%s%%20-cstatement_timeout%%3D300", url);
    free(url);
    const char *argv[] = { "ingest", "--lot", "DEMO-01", "--sweeps", rig.small_csv, "--db",
                           timed, NULL };
    child c = spawn(argv, "timeout.err", 0);
    int code = wait_child(&c);
    char *err = child_err(&c);
    ck_assert_msg(code == 1 && count_lines(err) == 1 && strstr(err, "statement_timeout") &&
                  strstr(err, "nothing was changed"), "exit %d: %s", code, err);
    free(err);
    sl_store_rollback(holder);
    sl_store_close(holder);
    ck_assert_int_eq(digest_lot(db, "DEMO-01").devices, 0);

    static const char *const urls[][2] = {
        { "postgresql:///lots?host=/nonexistent-folder", "cannot be reached" },
        { NULL, "refused the login" },
    };
    char refused[4200];
    char *base = sl_test_db(db);
    snprintf(refused, sizeof refused, "%s&user=no_such_role", base);
    free(base);
    for (int i = 0; i < 2; i++) {
        const char *lots[] = { "lots", "--db", urls[i][0] ? urls[i][0] : refused, NULL };
        sl_run_result r = sl_test_run(rig.dir, NULL, lots);
        ck_assert_msg(r.exit_code == 1 && count_lines(r.err) == 1 && strstr(r.err, urls[i][1]),
                      "exit %d: %s", r.exit_code, r.err);
        ck_assert_str_eq(r.out, "");
        sl_run_result_free(&r);
    }
    sl_store_lot_clear(&lot);
    sl_diag_free(diag);
    free(db);
}
END_TEST

/* `splitlot lots` against url with PGPASSWORD set to password (NULL:
 * unset): its exit code and error output (malloc'd) in *err. */
static int lots_with_password(const char *url, const char *password, char **err)
{
    if (password)
        setenv("PGPASSWORD", password, 1);
    else
        unsetenv("PGPASSWORD");
    const char *argv[] = { "lots", "--db", url, NULL };
    sl_run_result r = sl_test_run(rig.dir, NULL, argv);
    unsetenv("PGPASSWORD");
    int code = r.exit_code;
    *err = strdup(r.err ? r.err : "");
    if (code != 0)
        ck_assert_str_eq(r.out, "");
    sl_run_result_free(&r);
    return code;
}

/* A login the server refuses (no password, a wrong one) and a database
 * the server does not have: exit 1, one line saying which, never "cannot
 * be reached"; the right password (from PGPASSWORD, as libpq reads it)
 * gets in. The test's own server asks this role for a password. */
START_TEST(server_login_failures_say_which)
{
    if (!sl_test_pg() || !getenv("SL_PG_BINDIR"))
        return;
    private_server srv;
    ck_assert_msg(server_make(&srv, "pg-auth", "local all sl_pw_user scram-sha-256") == 0,
                  "the test's own PostgreSQL server did not start");
    sl_store *owner = db_open(srv.url);
    ck_assert_int_eq(sl__db_exec(owner->db, "CREATE ROLE sl_pw_user LOGIN SUPERUSER PASSWORD "
                                            "'right horse'"), SL__DB_OK);
    sl_store_close(owner);
    char url[1300];
    snprintf(url, sizeof url, "postgresql:///lots?host=%s&user=sl_pw_user", srv.dir);
    static const struct { const char *password, *needle; } logins[] = {
        { "wrong horse", "password authentication failed" },
        { NULL, "no password supplied" },
    };
    for (size_t i = 0; i < sizeof logins / sizeof logins[0]; i++) {
        char *err = NULL;
        int code = lots_with_password(url, logins[i].password, &err);
        ck_assert_msg(code == 1 && count_lines(err) == 1 && strstr(err, "refused the login") &&
                      strstr(err, logins[i].needle) && !strstr(err, "cannot be reached"),
                      "%zu: exit %d: %s", i, code, err);
        free(err);
    }
    char *err = NULL;
    ck_assert_msg(lots_with_password(url, "right horse", &err) == 0, "right password: %s", err);
    free(err);

    snprintf(url, sizeof url, "postgresql:///no_such_lots?host=%s", srv.dir);
    strncat(url, strstr(srv.url, "&user="), sizeof url - strlen(url) - 1);
    int code = lots_with_password(url, NULL, &err);
    ck_assert_msg(code == 1 && count_lines(err) == 1 &&
                  strstr(err, "database \"no_such_lots\" does not exist") &&
                  strstr(err, "has no such database") && !strstr(err, "cannot be reached"),
                  "exit %d: %s", code, err);
    free(err);
    server_stop(&srv, "immediate");
}
END_TEST

static Suite *reliability_suite(void)
{
    Suite *s = suite_create("reliability");
    TCase *tc = tcase_create("abuse");
    tcase_add_unchecked_fixture(tc, rig_setup, rig_teardown);
    tcase_set_timeout(tc, 900);
    tcase_add_test(tc, kill_during_import_keeps_database_whole);
    tcase_add_test(tc, file_size_limit_refused_cleanly);
    tcase_add_test(tc, concurrent_imports_and_compare);
    tcase_add_loop_test(tc, hostile_file_refused_at_its_line, 0,
                        (int)(sizeof hostile / sizeof hostile[0]));
    tcase_add_loop_test(tc, self_referencing_plan_refused, 0,
                        (int)(sizeof self_referencing_plans / sizeof self_referencing_plans[0]));
    tcase_add_test(tc, negative_zero_and_subnormal_import);
    tcase_add_test(tc, server_stopped_mid_import);
    tcase_add_test(tc, server_failures_are_one_clear_line);
    tcase_add_test(tc, server_login_failures_say_which);
    suite_add_tcase(s, tc);
    /* mounts and chattr: need root (or CAP_SYS_ADMIN), skipped otherwise */
    TCase *root = tcase_create("root");
    tcase_add_unchecked_fixture(root, rig_setup, rig_teardown);
    tcase_set_timeout(root, 900);
    tcase_add_test(root, full_disk_refused_cleanly);
    tcase_add_test(root, rejects_on_full_disk_leave_database_unchanged);
    tcase_add_test(root, read_only_file_system_refused);
    tcase_add_test(root, immutable_database_refused);
    suite_add_tcase(s, root);
    return s;
}

int main(void) { return sl_test_main(reliability_suite()); }
