/* SPDX-License-Identifier: MIT
 * Command-line tests of `splitlot lots`: the lot ids in creation order in
 * every format (shell completion reads the CSV), a missing database refused
 * without creating one, unknown options.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "test_support.h"

/* A scratch folder with t.db holding the demo plan as LOT-B, then LOT-A. */
static char *make_db(void)
{
    char *dir = sl_test_tmpdir();
    char *demo_path = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *demo = sl_test_read_file(demo_path, NULL);
    ck_assert(demo && strstr(demo, "\nlot: DEMO-01\n"));
    const char *lots[] = { "LOT-B", "LOT-A" };
    for (size_t i = 0; i < 2; i++) {
        char *at = strstr(demo, "\nlot: DEMO-01\n") + 1;
        char *text = malloc(strlen(demo) + 16);
        sprintf(text, "%.*slot: %s\n%s", (int)(at - demo), demo, lots[i], at + 13);
        char *plan = sl_test_path(dir, "p.yaml");
        ck_assert_int_eq(sl_test_write_file(plan, text), 0);
        const char *argv[] = { "predict", "p.yaml", "--db", "t.db", NULL };
        sl_run_result r = sl_test_run(dir, NULL, argv);
        ck_assert_msg(r.exit_code == 0, "predict: %s", r.err);
        sl_run_result_free(&r);
        free(plan);
        free(text);
    }
    free(demo);
    free(demo_path);
    return dir;
}

START_TEST(test_lots_in_creation_order)
{
    char *dir = make_db();
    const char *csv[] = { "lots", "--db", "t.db", "--format", "csv", NULL };
    sl_run_result r = sl_test_run(dir, NULL, csv);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_str_eq(r.err, "");
    ck_assert_str_eq(r.out, "lot\r\nLOT-B\r\nLOT-A\r\n");
    sl_run_result_free(&r);
    const char *json[] = { "lots", "--db", "t.db", "--format", "json", NULL };
    r = sl_test_run(dir, NULL, json);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "\"lot\": \"LOT-B\"") < strstr(r.out, "\"lot\": \"LOT-A\""));
    sl_run_result_free(&r);
    const char *table[] = { "lots", "--db", "t.db", NULL };
    r = sl_test_run(dir, NULL, table);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "LOT-B\nLOT-A\n") != NULL);
    sl_run_result_free(&r);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

START_TEST(test_missing_database)
{
    SL_TEST_SQLITE_ONLY(); /* a missing file; a server's database always exists */
    char *dir = sl_test_tmpdir();
    const char *argv[] = { "lots", "--db", "none.db", NULL };
    sl_run_result r = sl_test_run(dir, NULL, argv);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert(strstr(r.err, "none.db") != NULL);
    ck_assert_str_eq(r.out, "");
    sl_run_result_free(&r);
    char *db = sl_test_path(dir, "none.db");
    ck_assert_int_ne(access(db, F_OK), 0); /* not created */
    free(db);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

START_TEST(test_bad_usage)
{
    const char *opt[] = { "lots", "--lto", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, opt);
    ck_assert_int_eq(r.exit_code, 2);
    sl_run_result_free(&r);
    const char *arg[] = { "lots", "extra", NULL };
    r = sl_test_run(NULL, NULL, arg);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert(strstr(r.err, "unexpected argument 'extra'") != NULL);
    sl_run_result_free(&r);
}
END_TEST

static Suite *cli_lots_suite(void)
{
    Suite *s = suite_create("cli_lots");
    TCase *tc = tcase_create("lots");
    tcase_add_test(tc, test_lots_in_creation_order);
    tcase_add_test(tc, test_missing_database);
    tcase_add_test(tc, test_bad_usage);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(cli_lots_suite()); }
