/* SPDX-License-Identifier: MIT
 * Command-line tests of `splitlot compare` and `splitlot history`: the JSON
 * keys of docs/formats.md, --only-flagged, --fail-on-flags (exit 3),
 * unknown lots and missing databases (exit 2, nothing created), and compare's
 * peak memory, which must not grow with the lot. The numbers themselves are
 * checked in test_analyze.c. Lots are simulated, invented data.
 */
#define _DEFAULT_SOURCE /* wait4(2): a child's own peak resident size */
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "store_internal.h"

#include "test_support.h"

#define N_OF(a) (sizeof(a) / sizeof((a)[0]))

/* One scratch folder for the suite, made once: t.db holds
 *   DEMO-01   the demo plan, seed 11, the simulator's default 2 % faulty devices;
 *   CLEAN-01  the demo plan, seed 3, --fault-fraction 0: no device flagged
 *             (regression value: seed 3 also draws no shifted device);
 *   OFF-01    as CLEAN-01 but anneal-350 delivers 0.2e12 of 1.2e12 cm^-2;
 *   DIFF-01   as CLEAN-01 but anneal-350 delivers 0.85e12: its interval
 *             excludes the plan yet reaches inside the tolerance (differs). */
static char *dir;

static sl_run_result run_in(const char *const *argv) { return sl_test_run(dir, NULL, argv); }

static void must_run(const char *const *argv)
{
    sl_run_result r = run_in(argv);
    ck_assert_msg(r.exit_code == 0, "%s: exit %d: %s", argv[0], r.exit_code, r.err);
    sl_run_result_free(&r);
}

static void add_lot(const char *lot, const char *seed, const char *fault, const char *truth)
{
    char *demo_path = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *demo = sl_test_read_file(demo_path, NULL);
    ck_assert(demo && strncmp(strstr(demo, "\nlot: ") + 1, "lot: DEMO-01\n", 13) == 0);
    char plan[64], sim[64], sweeps[96];
    snprintf(plan, sizeof plan, "%s.yaml", lot);
    snprintf(sim, sizeof sim, "sim-%s", lot);
    snprintf(sweeps, sizeof sweeps, "%s/sweeps.csv", sim);
    char *text = malloc(strlen(demo) + 64), *at = strstr(demo, "\nlot: ") + 1;
    sprintf(text, "%.*slot: %s\n%s", (int)(at - demo), demo, lot, at + 13);
    char *plan_path = sl_test_path(dir, plan);
    ck_assert_int_eq(sl_test_write_file(plan_path, text), 0);
    const char *predict[] = { "predict", plan, "--db", "t.db", NULL };
    must_run(predict);
    const char *simulate[] = { "simulate", plan, "--out", sim, "--seed", seed, "--fault-fraction",
                               fault, truth ? "--true-doping" : NULL, truth, NULL };
    must_run(simulate);
    const char *ingest[] = { "ingest", "--lot", lot, "--sweeps", sweeps, "--db", "t.db", NULL };
    must_run(ingest);
    free(plan_path);
    free(text);
    free(demo);
    free(demo_path);
}

static void setup(void)
{
    dir = sl_test_tmpdir();
    ck_assert(dir != NULL);
    add_lot("DEMO-01", "11", "0.02", NULL);
    add_lot("CLEAN-01", "3", "0", NULL);
    add_lot("OFF-01", "3", "0", "anneal-350=0.2e12");
    add_lot("DIFF-01", "3", "0", "anneal-350=0.85e12");
}

static void teardown(void)
{
    sl_test_rmtree(dir);
    free(dir);
    dir = NULL;
}

/* compare --lot LOT --db t.db --format json [extra]; asserts the exit code. */
static sl_run_result compare_json(const char *lot, const char *extra, int want_exit)
{
    const char *argv[] = { "compare", "--lot", lot, "--db", "t.db", "--format", "json", extra, NULL };
    sl_run_result r = run_in(argv);
    ck_assert_msg(r.exit_code == want_exit, "compare %s %s: exit %d: %s", lot, extra ? extra : "",
                  r.exit_code, r.err);
    return r;
}

/* The lines of array `"key": [` (one object per line), as a count; each line
 * is handed to check (may be NULL). */
static size_t for_rows(const char *json, const char *key, void (*check)(const char *row))
{
    char pat[64];
    snprintf(pat, sizeof pat, "\"%s\": [\n", key);
    const char *p = strstr(json, pat);
    ck_assert_msg(p != NULL, "no array %s", key);
    size_t n = 0;
    for (p += strlen(pat); strncmp(p, "    {", 5) == 0; n++) {
        const char *end = strchr(p, '\n');
        char *row = strndup(p, (size_t)(end - p));
        if (check)
            check(row);
        free(row);
        p = end + 1;
    }
    return n;
}

static long top_number(const char *json, const char *key)
{
    char pat[64];
    snprintf(pat, sizeof pat, "\n  \"%s\": ", key);
    const char *p = strstr(json, pat);
    ck_assert_msg(p != NULL, "no top-level %s", key);
    return strtol(p + strlen(pat), NULL, 10);
}

static void has_keys(const char *row, const char *const *keys, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        char pat[64];
        snprintf(pat, sizeof pat, "\"%s\": ", keys[i]);
        ck_assert_msg(strstr(row, pat) != NULL, "no key %s in %s", keys[i], row);
    }
}

static void device_keys(const char *row)
{
    static const char *const keys[] = { "wafer", "device", "die_x", "die_y", "split",
                                        "cnp_predicted_V", "cnp_measured_V", "deviation_V", "z",
                                        "doping_measured_per_cm2", "flags", "measurements",
                                        "mobility_cm2_per_Vs", "n0_per_cm2", "r_contact_ohm",
                                        "hysteresis_V", "floor_predicted_per_cm2",
                                        "channel_length_um", "channel_width_um" };
    has_keys(row, keys, N_OF(keys));
}

static void run_keys(const char *row)
{
    static const char *const keys[] = { "run", "step", "temperature_K", "devices", "source",
                                        "imported_utc" };
    has_keys(row, keys, N_OF(keys));
}

static void split_keys(const char *row)
{
    static const char *const keys[] = { "split", "devices", "usable", "wafers", "censored",
                                        "cnp_predicted_V", "cnp_mean_V", "cnp_ci95_V", "flagged" };
    has_keys(row, keys, N_OF(keys));
}

static void effect_keys(const char *row)
{
    static const char *const keys[] = { "factor", "level", "planned_per_cm2",
                                        "estimated_per_cm2", "stderr_per_cm2", "df",
                                        "ci95_per_cm2", "tolerance_per_cm2", "verdict", "flags" };
    has_keys(row, keys, N_OF(keys));
}

static void failure_keys(const char *row)
{
    static const char *const keys[] = { "rank", "wafer", "device", "die_x", "die_y", "split",
                                        "reason" };
    has_keys(row, keys, N_OF(keys));
}

START_TEST(test_compare_json_keys)
{
    sl_run_result r = compare_json("DEMO-01", NULL, 0);
    ck_assert_str_eq(r.err, "");
    ck_assert(strncmp(r.out, "{\n  \"lot\": \"DEMO-01\",\n", 22) == 0);
    size_t n_dev = for_rows(r.out, "devices", device_keys);
    ck_assert_uint_eq(n_dev, (size_t)top_number(r.out, "device_count"));
    /* one "devices" key in the object: the table (the count once shared its name) */
    const char *first = strstr(r.out, "\n  \"devices\": ");
    ck_assert(first != NULL && strstr(first + 1, "\n  \"devices\": ") == NULL);
    ck_assert_uint_eq(for_rows(r.out, "splits", split_keys), 8);   /* 2 x 2 x 2 */
    ck_assert_uint_eq(for_rows(r.out, "effects", effect_keys), 4); /* intercept + 3 levels */
    size_t n_fa = for_rows(r.out, "failure_analysis", failure_keys);
    ck_assert_uint_eq(n_fa, (size_t)top_number(r.out, "flagged"));
    ck_assert_uint_gt(n_fa, 0);
    /* an extraction failure has no measured value: null, not a number */
    ck_assert(strstr(r.out, "\"cnp_measured_V\": null, \"deviation_V\": null") != NULL);
    sl_run_result_free(&r);
}
END_TEST

static void flagged_row(const char *row)
{
    device_keys(row);
    ck_assert_msg(strstr(row, "\"flags\": []") == NULL, "unflagged device listed: %s", row);
}

START_TEST(test_only_flagged)
{
    sl_run_result all = compare_json("DEMO-01", NULL, 0);
    sl_run_result some = compare_json("DEMO-01", "--only-flagged", 0);
    size_t n_all = for_rows(all.out, "devices", NULL);
    size_t n_some = for_rows(some.out, "devices", flagged_row);
    ck_assert_uint_eq(n_some, (size_t)top_number(some.out, "flagged"));
    ck_assert_uint_gt(n_some, 0);
    ck_assert_uint_lt(n_some, n_all);
    /* the other tables are unchanged */
    ck_assert_str_eq(strstr(some.out, "\"splits\": ["), strstr(all.out, "\"splits\": ["));
    sl_run_result_free(&all);
    sl_run_result_free(&some);
}
END_TEST

START_TEST(test_fail_on_flags)
{
    sl_run_result r = compare_json("DEMO-01", "--fail-on-flags", 3);
    ck_assert_int_gt(top_number(r.out, "flagged"), 0); /* the report is still printed */
    sl_run_result_free(&r);
    r = compare_json("DEMO-01", NULL, 0); /* flags alone do not fail without the option */
    sl_run_result_free(&r);

    r = compare_json("CLEAN-01", "--fail-on-flags", 0);
    ck_assert_int_eq(top_number(r.out, "flagged"), 0);        /* regression value, seed 3 */
    ck_assert_int_eq(top_number(r.out, "levels_off_plan"), 0);
    ck_assert(strstr(r.out, "\"flags\": [\"") == NULL);
    sl_run_result_free(&r);

    /* no device flagged, one level off-plan: that is a flag too */
    r = compare_json("OFF-01", "--fail-on-flags", 3);
    ck_assert_int_eq(top_number(r.out, "flagged"), 0); /* regression value, seed 3 */
    ck_assert_int_eq(top_number(r.out, "levels_off_plan"), 1);
    sl_run_result_free(&r);

    /* nothing off-plan, one level that differs from plan: a flag as well */
    r = compare_json("DIFF-01", "--fail-on-flags", 3);
    ck_assert_int_eq(top_number(r.out, "flagged"), 0);          /* regression value, seed 3 */
    ck_assert_int_eq(top_number(r.out, "levels_off_plan"), 0);  /* estimate 8.27e11 +/- 5.4e10 */
    ck_assert_int_eq(top_number(r.out, "levels_differing"), 1);
    ck_assert(strstr(r.out, "\"level\": \"anneal-350\"") &&
              strstr(r.out, "\"verdict\": \"differs\""));
    sl_run_result_free(&r);
}
END_TEST

START_TEST(test_unknown_lot)
{
    sl_run_result r = compare_json("NO-SUCH-LOT", NULL, 2);
    ck_assert_str_eq(r.out, "");
    ck_assert_msg(strstr(r.err, "NO-SUCH-LOT") && strstr(r.err, "DEMO-01") &&
                      strstr(r.err, "CLEAN-01") && strstr(r.err, "OFF-01"),
                  "stderr: %s", r.err);
    ck_assert_ptr_eq(strchr(r.err, '\n'), r.err + strlen(r.err) - 1); /* one line */
    sl_run_result_free(&r);
}
END_TEST

START_TEST(test_missing_database)
{
    SL_TEST_SQLITE_ONLY(); /* a missing file; a server's database always exists */
    static const char *const cases[][8] = {
        { "compare", "--lot", "DEMO-01", "--db", "missing.db", NULL },
        { "history", "--db", "missing.db", NULL },
        { "history", "--db", "missing.db", "--emit-yaml", NULL },
    };
    char *missing = sl_test_path(dir, "missing.db");
    for (size_t i = 0; i < N_OF(cases); i++) {
        sl_run_result r = run_in(cases[i]);
        ck_assert_msg(r.exit_code == 2, "case %zu: exit %d", i, r.exit_code);
        ck_assert_msg(strstr(r.err, "missing.db") != NULL, "case %zu: %s", i, r.err);
        ck_assert_str_eq(r.out, "");
        ck_assert_msg(access(missing, F_OK) != 0, "case %zu created the database", i);
        sl_run_result_free(&r);
    }
    free(missing);
}
END_TEST

/* The database from SPLITLOT_DB when --db is not given (docs/formats.md). */
START_TEST(test_database_from_environment)
{
    static const char *const compare[] = { "compare", "--lot", "DEMO-01", "--format", "json", NULL };
    static const char *const history[] = { "history", "--format", "json", NULL };
    ck_assert_int_eq(setenv("SPLITLOT_DB", "t.db", 1), 0);
    sl_run_result r = run_in(compare);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    ck_assert(strncmp(r.out, "{\n  \"lot\": \"DEMO-01\",\n", 22) == 0);
    sl_run_result_free(&r);
    r = run_in(history);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_int_eq(top_number(r.out, "lots"), 4);
    sl_run_result_free(&r);
    if (sl_test_pg()) /* the rest is about a missing SQLite file */
        return;
    ck_assert_int_eq(setenv("SPLITLOT_DB", "elsewhere.db", 1), 0);
    r = run_in(compare);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert(strstr(r.err, "elsewhere.db") != NULL);
    sl_run_result_free(&r);
    char *elsewhere = sl_test_path(dir, "elsewhere.db");
    ck_assert_int_ne(access(elsewhere, F_OK), 0);
    free(elsewhere);
    unsetenv("SPLITLOT_DB");
}
END_TEST

START_TEST(test_bad_usage)
{
    static const char *const cases[][8] = {
        { "compare", "--db", "t.db", NULL },
        { "compare", "--lot", "DEMO-01", "--db", "t.db", "--format", "xml", NULL },
        { "compare", "--lot", "DEMO-01", "--db", "t.db", "--bogus", NULL },
        { "compare", "--lot", "DEMO-01", "--db", "t.db", "extra", NULL },
        { "history", "--db", "t.db", "--format", "yaml", NULL },
        { "history", "--db", "t.db", "extra", NULL },
    };
    for (size_t i = 0; i < N_OF(cases); i++) {
        sl_run_result r = run_in(cases[i]);
        ck_assert_msg(r.exit_code == 2, "case %zu: exit %d", i, r.exit_code);
        ck_assert_msg(strncmp(r.err, "splitlot: error: ", 17) == 0, "case %zu: %s", i, r.err);
        ck_assert_str_eq(r.out, "");
        sl_run_result_free(&r);
    }
}
END_TEST

START_TEST(test_table_and_csv)
{
    static const char *const table[] = { "compare", "--lot", "DEMO-01", "--db", "t.db", NULL };
    sl_run_result r = run_in(table);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "failure analysis, most severe first") != NULL);
    ck_assert(strstr(r.out, "ANOVA of wafer-mean doping across 8 splits") != NULL);
    sl_run_result_free(&r);
    static const char *const csv[] = { "compare", "--lot", "DEMO-01", "--db", "t.db",
                                       "--format", "csv", NULL };
    r = run_in(csv);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "\nwafer,device,die_x,die_y,split,cnp_predicted_V,") != NULL);
    ck_assert(strstr(r.out, "\nfactor,level,reference,planned_per_cm2,") != NULL);
    sl_run_result_free(&r);
}
END_TEST

static void level_keys(const char *row)
{
    static const char *const keys[] = { "factor", "level", "lots", "planned_per_cm2",
                                        "pooled_per_cm2", "pooled_se_per_cm2",
                                        "between_lot_sigma_per_cm2", "center_per_cm2",
                                        "limits_per_cm2", "drift_lots" };
    has_keys(row, keys, N_OF(keys));
}

static void estimate_keys(const char *row)
{
    static const char *const keys[] = { "factor", "level", "lot", "estimated_per_cm2",
                                        "stderr_per_cm2", "limits_per_cm2", "flags" };
    has_keys(row, keys, N_OF(keys));
}

START_TEST(test_history_json_and_yaml)
{
    static const char *const json[] = { "history", "--db", "t.db", "--format", "json", NULL };
    sl_run_result r = run_in(json);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_int_eq(top_number(r.out, "lots"), 4);
    ck_assert_int_eq(top_number(r.out, "lots_with_estimates"), 4);
    ck_assert_uint_eq(for_rows(r.out, "levels", level_keys), 4);
    ck_assert_uint_eq(for_rows(r.out, "estimates", estimate_keys), 16); /* 4 levels x 4 lots */
    sl_run_result_free(&r);
    static const char *const yaml[] = { "history", "--db", "t.db", "--emit-yaml", NULL };
    r = run_in(yaml);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_str_eq(r.err, "");
    ck_assert(strstr(r.out, "\nbaseline_doping_per_cm2: { mean: ") != NULL);
    ck_assert(strstr(r.out, "\n  - { name: anneal-350, doping_per_cm2: { mean: ") != NULL);
    sl_run_result_free(&r);
}
END_TEST

/* A database whose only lot has no measurements: no estimates, and the YAML
 * falls back to the plan's own values, saying so. */
START_TEST(test_history_without_measurements)
{
    char *plan = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    static const char *const sub[] = { "history", "--db", "empty/e.db", NULL };
    char *empty = sl_test_path(dir, "empty");
    ck_assert_int_eq(mkdir(empty, 0777), 0);
    const char *predict[] = { "predict", plan, "--db", "empty/e.db", NULL };
    must_run(predict);
    sl_run_result r = run_in(sub);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "lots_with_estimates: 0") != NULL);
    sl_run_result_free(&r);
    static const char *const yaml[] = { "history", "--db", "empty/e.db", "--emit-yaml", NULL };
    r = run_in(yaml);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "baseline_doping_per_cm2: { mean: -2e+12, sigma: 8e+11 }   "
                            "# not measured: planned value") != NULL);
    ck_assert(strstr(r.out, "name: anneal-350, doping_per_cm2: { mean: 1.2e+12, sigma: 3e+11, tolerance: 3e+11 }") != NULL);
    sl_run_result_free(&r);
    static const char *const compare[] = { "compare", "--lot", "DEMO-01", "--db", "empty/e.db",
                                           "--format", "json", NULL };
    r = run_in(compare);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_int_eq(top_number(r.out, "device_count"), 0);
    ck_assert(strstr(r.out, "\"anova\": {\"F\": null, \"df_between\": 0, \"df_within\": 0, "
                            "\"p\": null}") != NULL);
    sl_run_result_free(&r);
    free(empty);
    free(plan);
}
END_TEST

/* ---- memory ---- */

#if defined(__SANITIZE_ADDRESS__)
#define SL_UNDER_ASAN 1
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define SL_UNDER_ASAN 1
#endif
#endif

/* Peak resident size (KiB) of `splitlot compare --lot MANY-01` on db in a
 * format, output thrown away: the child's own ru_maxrss from wait4. */
static long compare_peak_kib(const char *db_path, const char *format)
{
    char *db = sl_test_db(db_path);
    pid_t pid = fork();
    ck_assert_int_ge(pid, 0);
    if (pid == 0) {
        int null = open("/dev/null", O_WRONLY);
        dup2(null, STDOUT_FILENO);
        dup2(null, STDERR_FILENO);
        execl(SL_BINARY, "splitlot", "compare", "--lot", "MANY-01", "--db", db, "--format", format,
              (char *)NULL);
        _exit(127);
    }
    int status = 0;
    struct rusage usage;
    ck_assert_int_eq(wait4(pid, &status, 0, &usage), pid);
    ck_assert_msg(WIFEXITED(status) && WEXITSTATUS(status) == 0, "compare on %s failed", db);
    free(db);
    return usage.ru_maxrss;
}

/* The plan of tests/data/analyze/many-devices.yaml (40 wafers, two splits)
 * with per_wafer devices drawn on each wafer, in its own database. */
static char *many_devices_db(const char *per_wafer)
{
    char *plan = sl_test_data("analyze/many-devices.yaml");
    char db[32], sim[32], results[64];
    snprintf(db, sizeof db, "many-%s.db", per_wafer);
    snprintf(sim, sizeof sim, "many-%s", per_wafer);
    snprintf(results, sizeof results, "%s/results.csv", sim);
    const char *predict[] = { "predict", plan, "--db", db, NULL };
    must_run(predict);
    const char *simulate[] = { "simulate", plan, "--out", sim, "--devices-per-wafer", per_wafer,
                               "--no-sweeps", NULL };
    must_run(simulate);
    const char *ingest[] = { "ingest", "--lot", "MANY-01", "--results", results, "--db", db, NULL };
    must_run(ingest);
    free(plan);
    return sl_test_path(dir, db);
}

/* compare's peak memory does not grow with the lot: about 1,800 and 14,600
 * devices peak within 1.5 MiB of each other in every format, where the
 * in-memory analysis it replaced took about 1.2 kB more a device (16 MB more
 * here). A memory size, not a timing. Skipped under AddressSanitizer, whose
 * allocator holds freed blocks back for a while. */
/* ---- the lot's record: plan revisions after measurement, stored predictions ---- */

/* The demo plan as lot REV-01 with one line replaced (or none), in
 * folder/rev.yaml; predict's run. */
static sl_run_result predict_rev(const char *folder, const char *from, const char *to)
{
    char *demo_path = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *demo = sl_test_read_file(demo_path, NULL);
    char *text = malloc(strlen(demo) + 256), *o = text;
    const char *at = strstr(demo, "lot: DEMO-01\n");
    o += sprintf(o, "%.*slot: REV-01\n", (int)(at - demo), demo);
    const char *rest = at + strlen("lot: DEMO-01\n");
    const char *hit = from ? strstr(rest, from) : NULL;
    if (hit)
        sprintf(o, "%.*s%s%s", (int)(hit - rest), rest, to, hit + strlen(from));
    else
        strcpy(o, rest);
    char *plan = sl_test_path(folder, "rev.yaml");
    ck_assert_int_eq(sl_test_write_file(plan, text), 0);
    const char *argv[] = { "predict", "rev.yaml", "--db", "t.db", "--format", "csv", NULL };
    sl_run_result r = sl_test_run(folder, NULL, argv);
    free(plan);
    free(text);
    free(demo);
    free(demo_path);
    return r;
}

static char *compare_in(const char *folder, const char *lot)
{
    const char *argv[] = { "compare", "--lot", lot, "--db", "t.db", "--format", "json", NULL };
    sl_run_result r = sl_test_run(folder, NULL, argv);
    ck_assert_msg(r.exit_code == 0, "compare: %s", r.err);
    free(r.err);
    return r.out;
}

/* A revision that would move measured wafers (another seed reshuffles the
 * wafers) is refused, naming them, and compare's output stays byte for
 * byte; a revision that moves none (a new title) is stored and the next run
 * is measured against it; compare reads the stored prediction, whatever the
 * code would compute now. */
START_TEST(test_plan_revisions_after_measurement)
{
    char *folder = sl_test_tmpdir();
    sl_run_result r = predict_rev(folder, NULL, NULL);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    const char *simulate[] = { "simulate", "rev.yaml", "--out", "sim", "--seed", "3", NULL };
    r = sl_test_run(folder, NULL, simulate);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    const char *ingest[] = { "ingest", "--lot", "REV-01", "--results", "sim/results.csv", "--db",
                             "t.db", NULL };
    r = sl_test_run(folder, NULL, ingest);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    char *before = compare_in(folder, "REV-01");

    r = predict_rev(folder, "seed: 2026", "seed: 2027");
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_msg(strstr(r.err, "rev.yaml: error: lot 'REV-01' has measurements on ") &&
                  strstr(r.err, " (alox20") && strstr(r.err, "a measured wafer keeps its split"),
                  "%s", r.err);
    ck_assert_str_eq(r.out, "");
    sl_run_result_free(&r);
    char *after = compare_in(folder, "REV-01");
    ck_assert_str_eq(after, before);
    free(after);

    r = predict_rev(folder, "(invented)", "(invented, revised)");
    ck_assert_msg(r.exit_code == 0 && strstr(r.err, "stored plan as revision 2"), "%s", r.err);
    sl_run_result_free(&r);
    after = compare_in(folder, "REV-01");
    ck_assert_int_eq(top_number(after, "plan_revision"), 1); /* the run's revision */
    free(after);
    r = sl_test_run(folder, NULL, ingest);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    after = compare_in(folder, "REV-01");
    ck_assert_int_eq(top_number(after, "plan_revision"), 2);
    ck_assert_uint_eq(for_rows(after, "runs", run_keys), 4); /* two imports at 300 and 77 K */
    free(after);

    /* the stored prediction of revision 2 moved by +5 V: compare follows it */
    char *db_path = sl_test_path(folder, "t.db");
    sl_store *store = NULL;
    sl_diag *diag = sl_diag_new();
    ck_assert_int_eq(sl_test_store_open(&store, db_path, diag), SL_OK);
    ck_assert_int_eq(sl__db_exec(store->db, "UPDATE prediction SET cnp_V = cnp_V + 5 WHERE split_id "
                                            "IN (SELECT s.id FROM split s JOIN plan_revision r ON "
                                            "r.id = s.revision_id WHERE r.revision = 2)"),
                     SL__DB_OK);
    sl_store_close(store);
    sl_diag_free(diag);
    char *moved = compare_in(folder, "REV-01");
    const char *p = strstr(before, "\"cnp_predicted_V\": "), *q = strstr(moved, "\"cnp_predicted_V\": ");
    ck_assert(p && q);
    double was = strtod(p + 19, NULL), now = strtod(q + 19, NULL);
    ck_assert_msg(now - was > 4.999 && now - was < 5.001, "%g -> %g", was, now);
    free(moved);

    /* a later step measured at 77 K only: the default view is that step at
     * 77 K (its first temperature with data); --step final goes back to
     * 300 K, and a temperature is matched within 0.5 K */
    char *src = sl_test_path(folder, "sim/results.csv");
    char *text = sl_test_read_file(src, NULL);
    char *cold = malloc(strlen(text) + 1), *o = cold;
    char *save = NULL, *line = strtok_r(text, "\n", &save);
    o += sprintf(o, "%s\n", line);
    while ((line = strtok_r(NULL, "\n", &save)))
        if (strlen(line) > 3 && strcmp(line + strlen(line) - 3, ",77") == 0)
            o += sprintf(o, "%s\n", line);
    char *cold_path = sl_test_path(folder, "cold.csv");
    ck_assert_int_eq(sl_test_write_file(cold_path, cold), 0);
    const char *later[] = { "ingest", "--lot", "REV-01", "--results", "cold.csv", "--db", "t.db",
                            "--step", "after-anneal", NULL };
    r = sl_test_run(folder, NULL, later);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    char *view = compare_in(folder, "REV-01");
    ck_assert(strstr(view, "\"step\": \"after-anneal\",\n  \"temperature_K\": 77,\n"));
    free(view);
    const char *final_view[] = { "compare", "--lot", "REV-01", "--db", "t.db", "--format", "json",
                                 "--step", "final", NULL };
    r = sl_test_run(folder, NULL, final_view);
    ck_assert(r.exit_code == 0 && strstr(r.out, "\"step\": \"final\",\n  \"temperature_K\": 300,\n"));
    sl_run_result_free(&r);
    const char *near[] = { "compare", "--lot", "REV-01", "--db", "t.db", "--format", "json",
                           "--temperature-K", "77.2", NULL };
    r = sl_test_run(folder, NULL, near);
    ck_assert(r.exit_code == 0 && strstr(r.out, "\"temperature_K\": 77,\n"));
    sl_run_result_free(&r);
    free(cold_path);
    free(cold);
    free(text);
    free(src);
    free(db_path);
    free(before);
    sl_test_rmtree(folder);
    free(folder);
}
END_TEST

/* stdout of a command run in folder, which must exit 0. */
static char *output_in(const char *folder, const char *const *argv)
{
    sl_run_result r = sl_test_run(folder, NULL, argv);
    ck_assert_msg(r.exit_code == 0, "%s: exit %d: %s", argv[0], r.exit_code, r.err);
    free(r.err);
    return r.out;
}

/* A revision accepted after measurement that changes a planned level (the
 * anneal's 1.2e12 to 0.4e12, no wafer moved) leaves compare and history
 * byte for byte as they were: the runs were measured against revision 1,
 * whose planned levels, tolerances and predictions they keep; a run ingested
 * under revision 2 is judged against revision 2's planned level. */
START_TEST(test_old_runs_keep_their_plan)
{
    char *folder = sl_test_tmpdir();
    sl_run_result r = predict_rev(folder, NULL, NULL);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    const char *simulate[] = { "simulate", "rev.yaml", "--out", "sim", "--seed", "3", NULL };
    free(output_in(folder, simulate));
    const char *ingest[] = { "ingest", "--lot", "REV-01", "--results", "sim/results.csv", "--db",
                             "t.db", NULL };
    free(output_in(folder, ingest));
    const char *text[] = { "compare", "--lot", "REV-01", "--db", "t.db", NULL };
    const char *history[] = { "history", "--db", "t.db", "--format", "json", NULL };
    char *json_before = compare_in(folder, "REV-01");
    char *text_before = output_in(folder, text), *history_before = output_in(folder, history);
    ck_assert(strstr(json_before, "\"planned_per_cm2\": 1.2e+12") != NULL);

    r = predict_rev(folder, "mean: 1.2e12", "mean: 0.4e12");
    ck_assert_msg(r.exit_code == 0 && strstr(r.err, "stored plan as revision 2"), "%s", r.err);
    sl_run_result_free(&r);
    char *json_after = compare_in(folder, "REV-01");
    char *text_after = output_in(folder, text), *history_after = output_in(folder, history);
    ck_assert_str_eq(json_after, json_before);
    ck_assert_str_eq(text_after, text_before);
    ck_assert_str_eq(history_after, history_before);
    free(json_after);

    free(output_in(folder, ingest)); /* a run under revision 2: its plan now */
    json_after = compare_in(folder, "REV-01");
    ck_assert_int_eq(top_number(json_after, "plan_revision"), 2);
    ck_assert(strstr(json_after, "\"planned_per_cm2\": 4e+11") != NULL);
    ck_assert(strstr(json_after, "\"planned_per_cm2\": 1.2e+12") == NULL);
    free(json_after);
    free(text_after);
    free(history_after);
    free(json_before);
    free(text_before);
    free(history_before);
    sl_test_rmtree(folder);
    free(folder);
}
END_TEST

/* A 77 K results file ingested twice: the second run measured every device
 * of the first again, so the first has no current measurement and is not
 * in the 77 K view; the second is, with all its measurements current. */
START_TEST(test_superseded_run_not_in_view)
{
    char *folder = sl_test_tmpdir();
    sl_run_result r = predict_rev(folder, NULL, NULL);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    const char *simulate[] = { "simulate", "rev.yaml", "--out", "sim", "--seed", "3", NULL };
    free(output_in(folder, simulate));
    char *path = sl_test_path(folder, "sim/results.csv");
    char *text = sl_test_read_file(path, NULL);
    char *cold = malloc(strlen(text) + 1), *o = cold;
    char *save = NULL, *line = strtok_r(text, "\n", &save);
    o += sprintf(o, "%s\n", line);
    while ((line = strtok_r(NULL, "\n", &save)))
        if (strlen(line) > 3 && strcmp(line + strlen(line) - 3, ",77") == 0)
            o += sprintf(o, "%s\n", line);
    char *cold_path = sl_test_path(folder, "cold.csv");
    ck_assert_int_eq(sl_test_write_file(cold_path, cold), 0);
    const char *ingest[] = { "ingest", "--lot", "REV-01", "--results", "cold.csv", "--db", "t.db",
                             "--format", "json", NULL };
    char *first = output_in(folder, ingest);
    long devices = top_number(first, "devices");
    ck_assert_int_gt(devices, 0);
    free(first);
    free(output_in(folder, ingest));
    const char *compare[] = { "compare", "--lot", "REV-01", "--db", "t.db", "--format", "json",
                              "--temperature-K", "77", NULL };
    char *out = output_in(folder, compare);
    ck_assert_uint_eq(for_rows(out, "runs", run_keys), 2);
    const char *runs = strstr(out, "\"runs\": [\n");
    ck_assert(runs != NULL);
    const char *row1 = strchr(runs, '\n') + 1, *row2 = strchr(row1, '\n') + 1;
    ck_assert_msg(strstr(row1, "\"current\": 0,") && strstr(row1, "\"in_view\": false") &&
                  strstr(row1, "\"in_view\": false") < row2, "%s", runs);
    char want[64];
    snprintf(want, sizeof want, "\"current\": %ld,", devices);
    ck_assert_msg(strstr(row2, want) && strstr(row2, "\"in_view\": true"), "%s", runs);
    /* two runs in the view: every device measured in both, its newest shown */
    ck_assert_ptr_nonnull(strstr(out, "\"measurements\": 2,"));
    ck_assert_ptr_null(strstr(out, "\"measurements\": 1,"));
    free(out);
    free(cold_path);
    free(cold);
    free(text);
    free(path);
    sl_test_rmtree(folder);
    free(folder);
}
END_TEST

/* compare in another view: the 77 K run of a re-probed lot, chosen by
 * --temperature-K, and a temperature the plan lacks refused (exit 2). */
START_TEST(test_compare_views)
{
    sl_run_result r = compare_json("DEMO-01", NULL, 0);
    ck_assert(strstr(r.out, "\n  \"step\": \"final\",\n  \"temperature_K\": 300,\n") != NULL);
    ck_assert_uint_eq(for_rows(r.out, "runs", run_keys), 2); /* 300 K and 77 K */
    long warm = top_number(r.out, "device_count");
    sl_run_result_free(&r);
    r = compare_json("DEMO-01", "--temperature-K=4", 2);
    ck_assert_msg(strstr(r.err, "4 K is not one of its plan's temperatures (300, 77 K)"), "%s", r.err);
    sl_run_result_free(&r);
    r = compare_json("DEMO-01", "--temperature-K=77", 0);
    ck_assert(strstr(r.out, "\"temperature_K\": 77,\n") != NULL);
    /* the simulated sweeps hold every device at both temperatures */
    ck_assert_int_eq(top_number(r.out, "device_count"), warm);
    sl_run_result_free(&r);
    /* a step the lot has no run of is refused, naming the steps it has */
    r = compare_json("DEMO-01", "--step=etch", 2);
    ck_assert_str_eq(r.out, "");
    ck_assert_str_eq(r.err, "splitlot: error: lot DEMO-01 has no measurements at step 'etch' "
                            "(steps: final)\n");
    sl_run_result_free(&r);
}
END_TEST

/* history and report take the same view options and say which they used */
START_TEST(test_history_and_report_views)
{
    const char *history[] = { "history", "--db", "t.db", "--format", "json", "--temperature-K",
                              "77", NULL, NULL };
    sl_run_result r = run_in(history);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    ck_assert(strstr(r.out, "\"step\": \"\",\n  \"temperature_K\": 77,\n") != NULL);
    ck_assert_int_eq(top_number(r.out, "lots_with_estimates"), 4); /* every fixture lot has 77 K data */
    sl_run_result_free(&r);
    history[7] = "--step=after-anneal"; /* no lot measured after that step */
    r = run_in(history);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_str_eq(r.out, "");
    ck_assert_msg(strstr(r.err, "no lot has measurements at step 'after-anneal'"), "%s", r.err);
    sl_run_result_free(&r);
    const char *no_step[] = { "report", "--lot", "CLEAN-01", "--db", "t.db", "--out", "e.html",
                              "--no-history", "--step", "etch", NULL };
    r = run_in(no_step);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_msg(strstr(r.err, "lot CLEAN-01 has no measurements at step 'etch' (steps: final)"),
                  "%s", r.err);
    sl_run_result_free(&r);
    const char *report[] = { "report", "--lot", "CLEAN-01", "--db", "t.db", "--out", "v.html",
                             "--no-history", "--step", "final", NULL };
    r = run_in(report);
    ck_assert_msg(r.exit_code == 0 && strstr(r.out, "measurements at step final, 300 K"), "%s%s",
                  r.out, r.err);
    sl_run_result_free(&r);
    char *path = sl_test_path(dir, "v.html");
    char *html = sl_test_read_file(path, NULL);
    ck_assert(html && strstr(html, "<section id=\"runs\"") && strstr(html, "sim-CLEAN-01/sweeps.csv"));
    free(html);
    free(path);
}
END_TEST

START_TEST(test_compare_memory_is_flat)
{
#ifdef SL_UNDER_ASAN
    printf("test_cli_compare: test_compare_memory_is_flat skipped: AddressSanitizer build\n");
    return;
#endif
    static const char *const formats[] = { "json", "csv", "table" };
    char *small = many_devices_db("50"), *large = many_devices_db("400");
    for (size_t i = 0; i < N_OF(formats); i++) {
        long small_kib = compare_peak_kib(small, formats[i]);
        long large_kib = compare_peak_kib(large, formats[i]);
        ck_assert_msg(small_kib > 0, "no peak resident size reported");
        ck_assert_msg(large_kib - small_kib < 1536, "--format %s: %ld KiB for 1,800 devices, %ld KiB "
                      "for 14,600", formats[i], small_kib, large_kib);
    }
    free(small);
    free(large);
}
END_TEST

static size_t count_nl(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

/* The output of a command on a database (stdout; exit 0 asserted). */
static char *output_on(const char *db, const char *const *argv_with_db_last)
{
    const char *argv[16];
    size_t n = 0;
    for (; argv_with_db_last[n]; n++)
        argv[n] = argv_with_db_last[n];
    argv[n++] = "--db";
    argv[n++] = db;
    argv[n] = NULL;
    sl_run_result r = run_in(argv);
    ck_assert_msg(r.exit_code == 0, "%s on %s: exit %d: %s", argv[0], db, r.exit_code, r.err);
    char *out = r.out;
    free(r.err);
    return out;
}

/* The checksum db copy printed for one lot (csv: lot,sha256). */
static void copy_checksum(char sum[65], const char *from, const char *to, const char *lot)
{
    const char *argv[] = { "db", "copy", "--from", from, "--to", to, "--lot", lot, "--format",
                           "csv", NULL };
    sl_run_result r = run_in(argv);
    ck_assert_msg(r.exit_code == 0, "db copy %s -> %s: %s", from, to, r.err);
    const char *row = strchr(r.out, '\n');
    ck_assert(row && strlen(row) > strlen(lot) + 66);
    snprintf(sum, 65, "%s", row + 1 + strlen(lot) + 1);
    sl_run_result_free(&r);
}

/* The same lots give the same answers byte for byte on either backend: t.db
 * (a PostgreSQL server under make check-pg) copied into an SQLite file and
 * back, compare, history and report read from each; each copy has its
 * source's checksum, and a lot the destination holds already is refused. */
START_TEST(test_same_answers_on_both_backends)
{
    static const char *const lots[] = { "DEMO-01", "CLEAN-01", "OFF-01", "DIFF-01" };
    char sums[3][65];
    for (size_t i = 0; i < N_OF(lots); i++) {
        copy_checksum(sums[0], "t.db", "same.sqlite", lots[i]);
        copy_checksum(sums[1], "same.sqlite", "back.db", lots[i]);
        ck_assert_str_eq(sums[0], sums[1]);
    }
    static const char *const history[] = { "history", "--format", "json", NULL };
    static const char *const report[] = { "report", "--lot", "OFF-01", "--out", "same.html", NULL };
    setenv("SOURCE_DATE_EPOCH", "1796083200", 1); /* 2026-12-01 00:00 UTC: no minute turns */
    const char *const dbs[] = { "t.db", "same.sqlite", "back.db" };
    char *first[6] = { NULL };
    for (size_t d = 0; d < N_OF(dbs); d++) {
        char *got[6];
        for (size_t i = 0; i < N_OF(lots); i++) {
            const char *compare[] = { "compare", "--lot", lots[i], "--format", "json", NULL };
            got[i] = output_on(dbs[d], compare);
        }
        got[4] = output_on(dbs[d], history);
        free(output_on(dbs[d], report));
        char *html = sl_test_path(dir, "same.html");
        got[5] = sl_test_read_file(html, NULL);
        free(html);
        ck_assert_ptr_nonnull(got[5]);
        for (size_t k = 0; k < 6; k++) {
            if (d == 0) {
                first[k] = got[k];
                continue;
            }
            ck_assert_msg(strcmp(first[k], got[k]) == 0, "output %zu differs on %s", k, dbs[d]);
            free(got[k]);
        }
    }
    ck_assert_msg(strstr(first[5], "2026-12-01 00:00 UTC"), "the page's date is SOURCE_DATE_EPOCH's");
    unsetenv("SOURCE_DATE_EPOCH");
    for (size_t k = 0; k < 6; k++)
        free(first[k]);
    const char *again[] = { "db", "copy", "--from", "t.db", "--to", "same.sqlite", NULL };
    sl_run_result r = run_in(again);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert(strstr(r.err, "is in same.sqlite already; nothing was copied") && count_nl(r.err) == 1);
    sl_run_result_free(&r);
}
END_TEST

static Suite *cli_compare_suite(void)
{
    Suite *s = suite_create("cli_compare");
    TCase *tc = tcase_create("compare and history");
    tcase_set_timeout(tc, 300);
    tcase_add_unchecked_fixture(tc, setup, teardown);
    tcase_add_test(tc, test_compare_json_keys);
    tcase_add_test(tc, test_only_flagged);
    tcase_add_test(tc, test_fail_on_flags);
    tcase_add_test(tc, test_unknown_lot);
    tcase_add_test(tc, test_missing_database);
    tcase_add_test(tc, test_database_from_environment);
    tcase_add_test(tc, test_bad_usage);
    tcase_add_test(tc, test_table_and_csv);
    tcase_add_test(tc, test_history_json_and_yaml);
    tcase_add_test(tc, test_history_without_measurements);
    tcase_add_test(tc, test_compare_memory_is_flat);
    tcase_add_test(tc, test_compare_views);
    tcase_add_test(tc, test_history_and_report_views);
    tcase_add_test(tc, test_plan_revisions_after_measurement);
    tcase_add_test(tc, test_old_runs_keep_their_plan);
    tcase_add_test(tc, test_superseded_run_not_in_view);
    tcase_add_test(tc, test_same_answers_on_both_backends);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(cli_compare_suite()); }
