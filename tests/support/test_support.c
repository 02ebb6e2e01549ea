/* SPDX-License-Identifier: MIT
 * Helpers shared by the Check suites (see test_support.h). POSIX only.
 */
#include "test_support.h"

#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <libpq-fe.h>

#include "splitlot/physics.h"

/* ---- the backend under test ---- */

int sl_test_pg(void)
{
    const char *url = getenv("SPLITLOT_TEST_DB");
    return url && *url;
}

/* A schema of the test server per database file name, made on first use. */
static int make_schema(const char *base, const char *schema, int fresh)
{
    static PGconn *conn;
    if (!conn)
        conn = PQconnectdb(base);
    if (PQstatus(conn) != CONNECTION_OK) {
        fprintf(stderr, "test support: cannot reach SPLITLOT_TEST_DB: %s", PQerrorMessage(conn));
        return -1;
    }
    char sql[192];
    snprintf(sql, sizeof sql, "SET client_min_messages = warning; %s%s%s"
                              "CREATE SCHEMA IF NOT EXISTS %s", fresh ? "DROP SCHEMA IF EXISTS " : "",
             fresh ? schema : "", fresh ? " CASCADE; " : "", schema);
    PGresult *res = PQexec(conn, sql);
    int ok = PQresultStatus(res) == PGRES_COMMAND_OK;
    PQclear(res);
    return ok ? 0 : -1;
}

char *sl_test_db_in(const char *cwd, const char *path)
{
    size_t len = strlen(path);
    if (!sl_test_pg() || strncmp(path, "postgres", 8) == 0 || len < 3 ||
        strcmp(path + len - 3, ".db") != 0)
        return strdup(path); /* a URL, or a file that is no database name (*.sqlite) */
    char here[4096], full[8192];
    if (path[0] == '/')
        snprintf(full, sizeof full, "%s", path);
    else
        snprintf(full, sizeof full, "%s/%s", cwd ? cwd : getcwd(here, sizeof here), path);
    unsigned long long h = 1469598103934665603ULL; /* FNV-1a, 64 bits */
    for (const char *p = full; *p; p++)
        h = (h ^ (unsigned char)*p) * 1099511628211ULL;
    char schema[40];
    snprintf(schema, sizeof schema, "t_%016llx", h);
    const char *base = getenv("SPLITLOT_TEST_DB");
    if (make_schema(base, schema, 0) != 0)
        return strdup(path);
    size_t n = strlen(base) + 64;
    char *url = malloc(n);
    if (url)
        snprintf(url, n, "%s%soptions=-csearch_path%%3D%s", base, strchr(base, '?') ? "&" : "?",
                 schema);
    return url;
}

char *sl_test_db(const char *path) { return sl_test_db_in(NULL, path); }

sl_status sl_test_store_open(sl_store **out, const char *path, sl_diag *diag)
{
    char *location = sl_test_db(path);
    sl_status s = location ? sl_store_open(out, location, diag) : SL_ENOMEM;
    free(location);
    return s;
}

char *sl_test_path(const char *dir, const char *name)
{
    size_t n = strlen(dir) + strlen(name) + 2;
    char *p = malloc(n);
    snprintf(p, n, "%s/%s", dir, name);
    return p;
}

char *sl_test_data(const char *name) { return sl_test_path(SL_TEST_DATA_DIR, name); }

/* $TMPDIR, else the POSIX default temporary folder. */
static const char *temp_base(void)
{
    const char *base = getenv("TMPDIR");
    return base && *base ? base : "/tmp";
}

char *sl_test_tmpdir(void)
{
    const char *base = temp_base();
    char *tmpl = sl_test_path(base, "splitlot-test-XXXXXX");
    if (!mkdtemp(tmpl)) {
        free(tmpl);
        return NULL;
    }
    return tmpl;
}

void sl_test_rmtree(const char *path)
{
    if (!path)
        return;
    pid_t pid = fork();
    if (pid == 0) {
        execlp("rm", "rm", "-rf", "--", path, (char *)NULL);
        _exit(127);
    }
    if (pid > 0)
        waitpid(pid, NULL, 0);
}

char *sl_test_read_file(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    size_t cap = 4096, n = 0;
    char *buf = malloc(cap);
    size_t got;
    while ((got = fread(buf + n, 1, cap - n - 1, f)) > 0) {
        n += got;
        if (cap - n - 1 == 0) {
            cap *= 2;
            buf = realloc(buf, cap);
        }
    }
    fclose(f);
    buf[n] = '\0';
    if (len)
        *len = n;
    return buf;
}

int sl_test_write_file(const char *path, const char *text)
{
    FILE *f = fopen(path, "wb");
    if (!f)
        return -1;
    size_t n = strlen(text);
    int ok = fwrite(text, 1, n, f) == n;
    return (fclose(f) == 0 && ok) ? 0 : -1;
}

/* ---- databases on the test server, where the suites copy files ---- */

/* A database path that is a schema of the test server (no such file). */
static int server_db(const char *path)
{
    size_t n = strlen(path);
    return sl_test_pg() && n > 3 && strcmp(path + n - 3, ".db") == 0 && access(path, F_OK) != 0;
}

static int db_checksum(const char *path, char hex[65])
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_status s = sl_test_store_open(&store, path, diag);
    if (s == SL_OK)
        s = sl_store_checksum(store, hex, NULL, diag);
    sl_store_close(store);
    sl_diag_free(diag);
    return s == SL_OK ? 0 : -1;
}

/* Every lot of one server database into another, emptied first. */
static int db_copy(const char *from, const char *to)
{
    char *url = sl_test_db(to);
    const char *opt = url ? strstr(url, "search_path%3D") : NULL;
    if (!opt || make_schema(getenv("SPLITLOT_TEST_DB"), opt + 14, 1) != 0) {
        free(url);
        return -1;
    }
    sl_diag *diag = sl_diag_new();
    sl_store *src = NULL, *dst = NULL;
    char **names = NULL;
    size_t n = 0;
    sl_status s = sl_test_store_open(&src, from, diag);
    if (s == SL_OK)
        s = sl_store_open(&dst, url, diag);
    if (s == SL_OK)
        s = sl_store_begin_read(src, diag);
    if (s == SL_OK)
        s = sl_store_list_lots(src, &names, &n, diag);
    if (s == SL_OK)
        s = sl_store_begin(dst, diag);
    for (size_t i = 0; s == SL_OK && i < n; i++)
        s = sl_store_copy_lot(dst, src, names[i], diag);
    if (s == SL_OK)
        s = sl_store_commit(dst, diag);
    if (s != SL_OK)
        fprintf(stderr, "test support: copying %s to %s failed: %s\n", from, to,
                sl_diag_last(diag) ? sl_diag_last(diag) : "?");
    sl_store_free_names(names, n);
    sl_store_close(src);
    sl_store_close(dst);
    sl_diag_free(diag);
    free(url);
    return s == SL_OK ? 0 : -1;
}

int sl_test_files_equal(const char *a, const char *b)
{
    if (server_db(a) && server_db(b)) {
        char x[65], y[65];
        return db_checksum(a, x) == 0 && db_checksum(b, y) == 0 && strcmp(x, y) == 0;
    }
    size_t na = 0, nb = 0;
    char *x = sl_test_read_file(a, &na), *y = sl_test_read_file(b, &nb);
    int eq = x && y && na == nb && memcmp(x, y, na) == 0;
    free(x);
    free(y);
    return eq;
}

int sl_test_copy_file(const char *from, const char *to)
{
    if (server_db(from) && server_db(to))
        return db_copy(from, to);
    size_t n;
    char *x = sl_test_read_file(from, &n);
    if (!x)
        return -1;
    FILE *f = fopen(to, "wb");
    int ok = f && fwrite(x, 1, n, f) == n;
    if (f && fclose(f) != 0)
        ok = 0;
    free(x);
    return ok ? 0 : -1;
}

/* Drain a pipe into a malloc'd string. */
static char *slurp_fd(int fd)
{
    size_t cap = 4096, n = 0;
    char *buf = malloc(cap);
    for (;;) {
        if (cap - n < 2) {
            cap *= 2;
            buf = realloc(buf, cap);
        }
        ssize_t got = read(fd, buf + n, cap - n - 1);
        if (got < 0 && errno == EINTR)
            continue;
        if (got <= 0)
            break;
        n += (size_t)got;
    }
    buf[n] = '\0';
    return buf;
}

/* Every from in *text replaced by to (a new malloc'd string). */
static void replace_all(char **text, const char *from, const char *to)
{
    if (!*text || !*from || !strstr(*text, from))
        return;
    size_t nf = strlen(from), nt = strlen(to), n = 0;
    for (const char *p = *text; (p = strstr(p, from)); p += nf)
        n++;
    char *out = malloc(strlen(*text) + n * nt + 1), *o = out;
    if (!out)
        return;
    const char *p = *text, *q;
    while ((q = strstr(p, from))) {
        memcpy(o, p, (size_t)(q - p));
        o += q - p;
        memcpy(o, to, nt);
        o += nt;
        p = q + nf;
    }
    strcpy(o, p);
    free(*text);
    *text = out;
}

sl_run_result sl_test_run(const char *cwd, const char *stdin_text, const char *const *argv)
{
    sl_run_result r = { -1, NULL, NULL };
    /* the captured streams live in the temp dir (TMPDIR honoured) */
    const char *base = temp_base();
    char out_tmpl[4096], err_tmpl[4096], in_tmpl[4096];
    snprintf(out_tmpl, sizeof out_tmpl, "%s/splitlot-out-XXXXXX", base);
    snprintf(err_tmpl, sizeof err_tmpl, "%s/splitlot-err-XXXXXX", base);
    snprintf(in_tmpl, sizeof in_tmpl, "%s/splitlot-in-XXXXXX", base);
    int out_fd = mkstemp(out_tmpl), err_fd = mkstemp(err_tmpl), in_fd = mkstemp(in_tmpl);
    if (stdin_text) {
        size_t len = strlen(stdin_text);
        if (write(in_fd, stdin_text, len) != (ssize_t)len)
            return r;
        lseek(in_fd, 0, SEEK_SET);
    }
    size_t argc = 0;
    while (argv[argc])
        argc++;
    char **args = calloc(argc + 2, sizeof *args);
    char **mapped = calloc(argc + 1, sizeof *mapped);
    args[0] = (char *)SL_BINARY;
    for (size_t i = 0; i < argc; i++) {
        args[i + 1] = (char *)argv[i];
        /* a database file names a schema of the test server instead */
        if (i > 0 && sl_test_pg() &&
            (strcmp(argv[i - 1], "--db") == 0 || strcmp(argv[i - 1], "--from") == 0 ||
             strcmp(argv[i - 1], "--to") == 0))
            args[i + 1] = mapped[i] = sl_test_db_in(cwd, argv[i]);
    }
    const char *env_db = getenv("SPLITLOT_DB");
    char *mapped_env = env_db && *env_db ? sl_test_db_in(cwd, env_db) : NULL;
    pid_t pid = fork();
    if (pid == 0) {
        if (cwd && chdir(cwd) != 0)
            _exit(126);
        if (mapped_env)
            setenv("SPLITLOT_DB", mapped_env, 1);
        dup2(in_fd, 0);
        dup2(out_fd, 1);
        dup2(err_fd, 2);
        execv(SL_BINARY, args);
        _exit(127);
    }
    int status = 0;
    waitpid(pid, &status, 0);
    free(args);
    r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
    lseek(out_fd, 0, SEEK_SET);
    lseek(err_fd, 0, SEEK_SET);
    r.out = slurp_fd(out_fd);
    r.err = slurp_fd(err_fd);
    /* messages name the database as the test gave it, whatever the backend */
    for (size_t i = 0; i < argc; i++)
        if (mapped[i]) {
            replace_all(&r.out, mapped[i], argv[i]);
            replace_all(&r.err, mapped[i], argv[i]);
        }
    if (mapped_env) {
        replace_all(&r.out, mapped_env, env_db);
        replace_all(&r.err, mapped_env, env_db);
    }
    for (size_t i = 0; i < argc; i++)
        free(mapped[i]);
    free(mapped);
    free(mapped_env);
    close(out_fd);
    close(err_fd);
    close(in_fd);
    unlink(out_tmpl);
    unlink(err_tmpl);
    unlink(in_tmpl);
    return r;
}

void sl_run_result_free(sl_run_result *r)
{
    free(r->out);
    free(r->err);
    r->out = r->err = NULL;
}

void sl_test_golden(const char *path, const char *got, const char *what)
{
    const char *regenerate = getenv("SL_REGENERATE_GOLDEN");
    if (regenerate && strcmp(regenerate, "1") == 0) {
        ck_assert_msg(sl_test_write_file(path, got) == 0, "cannot write %s", path);
        printf("wrote %s\n", path);
        return;
    }
    char *want = sl_test_read_file(path, NULL);
    ck_assert_msg(want != NULL, "cannot read %s", path);
    if (strcmp(got, want) != 0) {
        /* the first line that differs, short enough for Check's message */
        size_t line = 1, at = 0, start = 0;
        for (; got[at] && got[at] == want[at]; at++)
            if (got[at] == '\n') {
                line++;
                start = at + 1;
            }
        int got_len = (int)strcspn(got + start, "\n"), want_len = (int)strcspn(want + start, "\n");
        ck_abort_msg("%s differs from %s at line %zu:\n  got:  %.*s\n  want: %.*s\n"
                     "(make golden rewrites the file when the change is intended)",
                     what, path, line, got_len < 160 ? got_len : 160, got + start,
                     want_len < 160 ? want_len : 160, want + start);
    }
    free(want);
}

/* Skips are counted in a file named by SL_TEST_SKIP_FILE, which sl_test_main
 * sets before the tests run: Check runs each test in a child process. */
void sl_test_skip(const char *test, const char *why)
{
    printf("%s skipped: %s\n", test, why);
    fflush(stdout);
    const char *path = getenv("SL_TEST_SKIP_FILE");
    FILE *f = path ? fopen(path, "a") : NULL;
    if (f) {
        fprintf(f, "%s\n", test);
        fclose(f);
    }
}

int sl_test_main(Suite *suite)
{
    sl_physics_init();
    char *skips = sl_test_path(temp_base(), "splitlot-skips-XXXXXX");
    int fd = mkstemp(skips);
    if (fd >= 0) {
        close(fd);
        setenv("SL_TEST_SKIP_FILE", skips, 1);
    }
    SRunner *sr = srunner_create(suite);
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    struct stat st;
    int skipped = fd >= 0 && stat(skips, &st) == 0 && st.st_size > 0;
    if (fd >= 0)
        unlink(skips);
    free(skips);
    if (failed != 0)
        return EXIT_FAILURE;
    return skipped ? SL_TEST_SKIPPED : EXIT_SUCCESS;
}
