/* SPDX-License-Identifier: MIT
 * Helpers shared by the Check suites: scratch folders, running the splitlot
 * binary and capturing what it prints, reading and comparing files, and the
 * common main() that runs one suite. Test code only.
 */
#ifndef SL_TEST_SUPPORT_H
#define SL_TEST_SUPPORT_H

#include <check.h>
#include <stddef.h>

#include "splitlot/store.h"

/* Result of running the splitlot binary. */
typedef struct {
    int exit_code;  /* process exit code, or 128 + signal */
    char *out;      /* captured stdout, NUL-terminated */
    char *err;      /* captured stderr, NUL-terminated */
} sl_run_result;

/* Run the built splitlot with the given arguments (NULL-terminated list), in
 * working folder cwd (NULL: current), optional stdin text. */
sl_run_result sl_test_run(const char *cwd, const char *stdin_text, const char *const *argv);
void sl_run_result_free(sl_run_result *r);

/* A fresh empty scratch folder under the system temp dir; caller frees the
 * string and may remove the folder with sl_test_rmtree. */
char *sl_test_tmpdir(void);
void sl_test_rmtree(const char *path);

/* Path join into a malloc'd string. */
char *sl_test_path(const char *dir, const char *name);
/* Path of a fixture under tests/data (malloc'd). */
char *sl_test_data(const char *name);

/* Whole file into a malloc'd NUL-terminated buffer (size in *len if non-NULL),
 * NULL when it cannot be read. */
char *sl_test_read_file(const char *path, size_t *len);
/* Write text to a file; returns 0 on success. */
int sl_test_write_file(const char *path, const char *text);
/* 1 when both files exist with identical bytes. */
int sl_test_files_equal(const char *a, const char *b);
/* Copy a file; returns 0 on success. */
int sl_test_copy_file(const char *from, const char *to);

/* The backend under test: SPLITLOT_TEST_DB set to a postgresql:// URL runs
 * every suite against that server (make check-pg), else SQLite files. */
int sl_test_pg(void);
/* Where a database named by a file path lives: the path itself on SQLite;
 * on PostgreSQL the URL of a schema of the test server made for that path
 * (relative paths from cwd, NULL: the current folder). The splitlot runs of
 * sl_test_run map --db, --from and --to FILE and SPLITLOT_DB the same way;
 * only names ending in .db are databases there. Malloc'd. */
char *sl_test_db(const char *path);
char *sl_test_db_in(const char *cwd, const char *path);
/* sl_store_open of the database a file path names (see sl_test_db). */
sl_status sl_test_store_open(sl_store **out, const char *path, sl_diag *diag);
/* A test of SQLite's own files (copies, permissions, fixtures): skipped on
 * PostgreSQL. */
#define SL_TEST_SQLITE_ONLY()                                                  \
    do {                                                                       \
        if (sl_test_pg())                                                      \
            return;                                                            \
    } while (0)

/* A golden output: got must equal the file at path byte for byte (a Check
 * failure naming what and path otherwise). With SL_REGENERATE_GOLDEN=1 in the
 * environment (make golden) got is written to path instead. */
void sl_test_golden(const char *path, const char *got, const char *what);

/* ctest's skip code (SKIP_RETURN_CODE in tests/CMakeLists.txt). */
#define SL_TEST_SKIPPED 77

/* A test that cannot run here (it needs root, say): prints "<test> skipped:
 * <why>" and returns normally; the test should then return. */
void sl_test_skip(const char *test, const char *why);

/* Run one suite with CK_NORMAL output; returns the process exit status:
 * failure when a test failed, SL_TEST_SKIPPED when none failed but one
 * skipped, else success. */
int sl_test_main(Suite *suite);

#endif
