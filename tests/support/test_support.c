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

#include "splitlot/physics.h"

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

int sl_test_files_equal(const char *a, const char *b)
{
    size_t na = 0, nb = 0;
    char *x = sl_test_read_file(a, &na), *y = sl_test_read_file(b, &nb);
    int eq = x && y && na == nb && memcmp(x, y, na) == 0;
    free(x);
    free(y);
    return eq;
}

int sl_test_copy_file(const char *from, const char *to)
{
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
    args[0] = (char *)SL_BINARY;
    for (size_t i = 0; i < argc; i++)
        args[i + 1] = (char *)argv[i];
    pid_t pid = fork();
    if (pid == 0) {
        if (cwd && chdir(cwd) != 0)
            _exit(126);
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
