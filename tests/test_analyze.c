/* SPDX-License-Identifier: MIT
 * Tests of the lot analysis, through the splitlot binary and the library:
 * compare's statistics against NumPy and SciPy on a small hand-made lot, flags
 * and their reasons, and simulated lots end to end (an under-delivering
 * treatment, faulty devices, drift across lots, the calibrated plan YAML).
 * Command-line details of compare/history are in test_cli_compare.c. All data
 * is invented.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/analyze.h"
#include "splitlot/store.h"
#include "test_support.h"

#define N_OF(a) (sizeof(a) / sizeof((a)[0]))

/* ---- helpers: running the binary, reading its JSON and CSV ------------------ */

static sl_run_result run_ok(const char *dir, const char *const *argv)
{
    sl_run_result r = sl_test_run(dir, NULL, argv);
    ck_assert_msg(r.exit_code == 0, "%s: exit %d: %s", argv[0], r.exit_code, r.err);
    return r;
}

static void run_quiet(const char *dir, const char *const *argv)
{
    sl_run_result r = run_ok(dir, argv);
    sl_run_result_free(&r);
}

/* JSON as the command layer prints it, one object of an array per line:
 * json_array finds `"key": [`, json_next_row walks from there, one row's line
 * into buf, 0 at the end of the array. */
static const char *json_array(const char *json, const char *key)
{
    char pat[96];
    snprintf(pat, sizeof pat, "\"%s\": [", key);
    const char *p = strstr(json, pat);
    ck_assert_msg(p != NULL, "no array '%s'", key);
    return p + strlen(pat);
}

static int json_next_row(const char **p, char *buf, size_t size)
{
    const char *s = *p;
    while (*s == ' ' || *s == '\n' || *s == ',')
        s++;
    if (*s != '{')
        return 0;
    const char *end = strchr(s, '\n');
    size_t n = end ? (size_t)(end - s) : strlen(s);
    ck_assert_uint_lt(n, size);
    memcpy(buf, s, n);
    buf[n] = '\0';
    *p = s + n;
    return 1;
}

/* Value of "key" in a row or document: json_str gives a string without its
 * quotes or a list's inner text, json_num a number (NaN for null). */
static const char *json_find(const char *text, const char *key)
{
    char pat[96];
    snprintf(pat, sizeof pat, "\"%s\": ", key);
    const char *p = strstr(text, pat);
    ck_assert_msg(p != NULL, "no key '%s' in %.120s", key, text);
    return p + strlen(pat);
}

static void json_str(const char *row, const char *key, char *out, size_t size)
{
    const char *v = json_find(row, key);
    char close = *v == '[' ? ']' : '"';
    ck_assert_msg(*v == '"' || *v == '[', "'%s' is not a string or list", key);
    const char *end = strchr(v + 1, close);
    ck_assert(end != NULL && (size_t)(end - v - 1) < size);
    memcpy(out, v + 1, (size_t)(end - v - 1));
    out[end - v - 1] = '\0';
}

static double json_num(const char *text, const char *key)
{
    const char *v = json_find(text, key);
    return strncmp(v, "null", 4) == 0 ? NAN : strtod(v, NULL);
}

/* The row of an array whose field `field` equals value, into buf. */
static void json_row_where(const char *json, const char *array, const char *field,
                           const char *value, char *buf, size_t size)
{
    const char *p = json_array(json, array);
    char got[128];
    while (json_next_row(&p, buf, size)) {
        json_str(buf, field, got, sizeof got);
        if (strcmp(got, value) == 0)
            return;
    }
    ck_abort_msg("no row of '%s' with %s = '%s'", array, field, value);
}

static void check_rel(const char *what, double got, double want, double rel)
{
    ck_assert_msg(fabs(got - want) <= rel * fabs(want), "%s = %.12g, expected %.12g (rel %g)",
                  what, got, want, rel);
}

/* One device of the simulator's truth.csv. */
typedef struct {
    char wafer[16], device[16], kind[24];
    long die_x, die_y;
} truth_row;

static truth_row *read_truth(const char *dir, size_t *n)
{
    char *path = sl_test_path(dir, "truth.csv");
    char *text = sl_test_read_file(path, NULL);
    ck_assert_msg(text != NULL, "cannot read %s", path);
    size_t cap = 1;
    for (const char *s = text; *s; s++)
        cap += *s == '\n';
    truth_row *rows = calloc(cap, sizeof *rows);
    *n = 0;
    char *save = NULL;
    strtok_r(text, "\n", &save); /* header */
    for (char *line = strtok_r(NULL, "\n", &save); line; line = strtok_r(NULL, "\n", &save)) {
        truth_row *t = &rows[(*n)++];
        char split[64];
        ck_assert_int_eq(sscanf(line, "%15[^,],%15[^,],%ld,%ld,%63[^,],%23[^,],", t->wafer,
                                t->device, &t->die_x, &t->die_y, split, t->kind), 6);
    }
    free(text);
    free(path);
    return rows;
}

/* The demo plan with its lot line renamed (malloc'd). */
static char *demo_plan_as(const char *lot)
{
    char *path = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *text = sl_test_read_file(path, NULL);
    ck_assert(text != NULL);
    const char *old = "lot: DEMO-01\n";
    char *at = strstr(text, old);
    ck_assert(at != NULL);
    size_t n = strlen(text) + strlen(lot) + 8;
    char *out = malloc(n);
    snprintf(out, n, "%.*slot: %s\n%s", (int)(at - text), text, lot, at + strlen(old));
    free(text);
    free(path);
    return out;
}

/* Store a demo-plan lot named lot, simulate it with the given seed and extra
 * simulate options (NULL-terminated, may be empty) into folder sim-LOT, and
 * ingest its sweeps (sweeps = 1) or results. */
static void demo_lot(const char *dir, const char *lot, const char *seed, const char *const *extra,
                     int sweeps)
{
    char plan_name[64], sim[64], data[96];
    snprintf(plan_name, sizeof plan_name, "%s.yaml", lot);
    snprintf(sim, sizeof sim, "sim-%s", lot);
    char *plan_path = sl_test_path(dir, plan_name), *plan = demo_plan_as(lot);
    ck_assert_int_eq(sl_test_write_file(plan_path, plan), 0);
    const char *predict[] = { "predict", plan_name, "--db", "t.db", NULL };
    run_quiet(dir, predict);
    const char *simulate[24] = { "simulate", plan_name, "--out", sim, "--seed", seed };
    size_t k = 6;
    for (size_t i = 0; extra[i]; i++)
        simulate[k++] = extra[i];
    if (!sweeps)
        simulate[k++] = "--no-sweeps";
    simulate[k] = NULL;
    run_quiet(dir, simulate);
    snprintf(data, sizeof data, "%s/%s", sim, sweeps ? "sweeps.csv" : "results.csv");
    const char *ingest[] = { "ingest", "--lot", lot, sweeps ? "--sweeps" : "--results", data,
                             "--db", "t.db", NULL };
    run_quiet(dir, ingest);
    free(plan_path);
    free(plan);
}

/* ---- statistics against NumPy and SciPy -------------------------------------- */

/* tests/data/analyze/stats-lot.yaml with stats-results.csv: nine wafers of an
 * unbalanced explicit design, four unmeasured devices and one outlier (S04 D3,
 * modified z 4.544 by 0.6745 * (x - numpy.median(x)) /
 * scipy.stats.median_abs_deviation(x, scale=1.0) over its split's V_cnp).
 * Expected values from NumPy 1.24.2 and SciPy 1.10.1, run in
 * tests/data/analyze with this script:
 *
 *   import csv, numpy as np, scipy.stats as st
 *   e, eps0 = 1.602176634e-19, 8.8541878128e-12
 *   cg = {"ox90": eps0 * 3.9 / 90e-9, "ox285": eps0 * 3.9 / 285e-9}
 *   plan = {"S01": ("ox90-plain", "ox90", 0, 0), "S02": ("ox90-plain", "ox90", 0, 0),
 *           "S03": ("ox90-anneal", "ox90", 1, 0), "S04": ("ox90-anneal", "ox90", 1, 0),
 *           "S05": ("ox285-plain", "ox285", 0, 0), "S06": ("ox285-plain", "ox285", 0, 0),
 *           "S07": ("ox285-both", "ox285", 1, 1), "S08": ("ox285-both", "ox285", 1, 1),
 *           "S09": ("ox90-cap", "ox90", 0, 1)}
 *   rows = [r for r in csv.DictReader(open("stats-results.csv")) if r["v_cnp_V"]]
 *   def doping(r):
 *       return -cg[plan[r["wafer"]][1]] * float(r["v_cnp_V"]) / e * 1e-4
 *   keep = [r for r in rows if not (r["wafer"] == "S04" and r["device"] == "D3")]
 *   wafers = sorted(plan)
 *   y = np.array([np.mean([doping(r) for r in keep if r["wafer"] == w]) for w in wafers])
 *   w = np.array([sum(r["wafer"] == w for r in keep) for w in wafers], float)
 *   X = np.array([[1.0, plan[k][1] == "ox285", plan[k][2], plan[k][3]] for k in wafers])
 *   sw = np.sqrt(w)
 *   b = np.linalg.lstsq(X * sw[:, None], y * sw, rcond=None)[0]
 *   r = y - X @ b
 *   s2 = np.sum(w * r ** 2) / (len(y) - X.shape[1])
 *   cov = s2 * np.linalg.inv(X.T @ np.diag(w) @ X)
 *   print(b.tolist(), np.sqrt(np.diag(cov)).tolist())
 *   groups, v = {}, {}
 *   for r in rows:
 *       groups.setdefault(plan[r["wafer"]][0], []).append(doping(r))
 *       v.setdefault(plan[r["wafer"]][0], []).append(float(r["v_cnp_V"]))
 *   print(st.f_oneway(*groups.values()))
 *   for s in v:
 *       a = np.array(v[s])
 *       print(s, st.t.interval(0.95, len(a) - 1, loc=a.mean(), scale=st.sem(a)))
 */
/* compare --format FORMAT of a fixture lot (plan and results under
 * tests/data/analyze) stored in a fresh scratch folder, returned in *dir_out. */
static char *fixture_compare(const char *plan_name, const char *results_name, const char *lot,
                             const char *format, char **dir_out)
{
    char *dir = sl_test_tmpdir();
    char *plan = sl_test_data(plan_name), *results = sl_test_data(results_name);
    /* the run's record the same every time: the file by a name relative to
     * the folder, the time from SOURCE_DATE_EPOCH (2026-11-20T00:00:00Z) */
    char *copy = sl_test_path(dir, "results.csv");
    ck_assert_int_eq(sl_test_copy_file(results, copy), 0);
    setenv("SOURCE_DATE_EPOCH", "1795132800", 1);
    const char *predict[] = { "predict", plan, "--db", "t.db", NULL };
    run_quiet(dir, predict);
    const char *ingest[] = { "ingest", "--lot", lot, "--results", "results.csv", "--db", "t.db",
                             NULL };
    run_quiet(dir, ingest);
    unsetenv("SOURCE_DATE_EPOCH");
    free(copy);
    const char *compare[] = { "compare", "--lot", lot, "--db", "t.db", "--format", format, NULL };
    sl_run_result r = run_ok(dir, compare);
    free(plan);
    free(results);
    free(r.err);
    *dir_out = dir;
    return r.out;
}

static char *fixture_compare_json(const char *plan_name, const char *results_name,
                                  const char *lot, char **dir_out)
{
    return fixture_compare(plan_name, results_name, lot, "json", dir_out);
}

static char *stats_compare_json(char **dir_out)
{
    return fixture_compare_json("analyze/stats-lot.yaml", "analyze/stats-results.csv", "STATS-01",
                                dir_out);
}

START_TEST(test_effects_against_numpy_wls)
{
    static const struct {
        const char *level;
        double est, se; /* numpy script above: b, sqrt(diag(cov)) */
    } want[] = {
        { "baseline", -2032144958535.4768, 66668170866.67375 },
        { "ox285", 242126249032.18652, 89377561266.80917 },
        { "anneal-a", 708447364144.8458, 89377561266.80919 },
        { "cap-b", 713138115278.9747, 97800798462.87735 },
    };
    char *dir, *json = stats_compare_json(&dir), row[1024];
    size_t rows = 0;
    for (const char *p = json_array(json, "effects"); json_next_row(&p, row, sizeof row);)
        rows++;
    ck_assert_uint_eq(rows, N_OF(want)); /* intercept + 3 levels */
    for (size_t i = 0; i < N_OF(want); i++) {
        json_row_where(json, "effects", "level", want[i].level, row, sizeof row);
        check_rel(want[i].level, json_num(row, "estimated_per_cm2"), want[i].est, 1e-8);
        check_rel(want[i].level, json_num(row, "stderr_per_cm2"), want[i].se, 1e-8);
    }
    /* the unbalanced design: wafers per level, 9 in all (S01..S09) */
    json_row_where(json, "effects", "level", "cap-b", row, sizeof row);
    ck_assert_int_eq((int)json_num(row, "wafers"), 3); /* S07, S08, S09 */
    /* the outlier is reported but left out of the wafer means (above) */
    json_row_where(json, "failure_analysis", "reason",
                   "far above its split's devices (modified z 4.5)", row, sizeof row);
    char wafer[16];
    json_str(row, "wafer", wafer, sizeof wafer);
    ck_assert_str_eq(wafer, "S04");
    free(json);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

START_TEST(test_anova_and_ci_against_scipy)
{
    char *dir, *json = stats_compare_json(&dir), row[1024];
    /* scipy.stats.f_oneway over the five splits' measured dopings (script above):
     * statistic=120.37277210013065, pvalue=1.995135360660606e-23 */
    check_rel("anova_F", json_num(json, "anova_F"), 120.37277210013065, 1e-8);
    check_rel("anova_p", json_num(json, "anova_p"), 1.995135360660606e-23, 1e-6);
    /* scipy.stats.t.interval(0.95, len(a) - 1, loc=a.mean(), scale=scipy.stats.sem(a)) */
    static const struct {
        const char *split;
        double lo, hi;
    } want[] = {
        { "ox90-plain", 7.895696903842366, 8.572848550703085 },
        { "ox90-anneal", 5.213307011975006, 6.65285965469166 },
        { "ox285-plain", 23.09837958470037, 25.038347688026906 },
        { "ox285-both", 2.35011933261521, 6.51748066738479 },
        { "ox90-cap", 5.232606381477732, 6.244393618522267 },
    };
    for (size_t i = 0; i < N_OF(want); i++) {
        json_row_where(json, "splits", "split", want[i].split, row, sizeof row);
        const char *ci = json_find(row, "cnp_ci95_V");
        double lo = NAN, hi = NAN;
        ck_assert_int_eq(sscanf(ci, "[%lf, %lf]", &lo, &hi), 2);
        check_rel(want[i].split, lo, want[i].lo, 1e-8);
        check_rel(want[i].split, hi, want[i].hi, 1e-8);
    }
    /* S02 D6 and S06 D1 unmeasured: 11 of 12 usable; 4 flagged in all + 1 outlier */
    json_row_where(json, "splits", "split", "ox285-plain", row, sizeof row);
    ck_assert_int_eq((int)json_num(row, "usable"), 11);
    ck_assert_int_eq((int)json_num(json, "flagged"), 5);
    free(json);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

/* The stats lot stored in a fresh scratch folder, its store open. */
typedef struct {
    char *dir, *json, *db;
    sl_store *store;
    sl_diag *diag;
} stats_store;

static stats_store open_stats_store(void)
{
    stats_store t = { 0 };
    t.json = stats_compare_json(&t.dir);
    t.db = sl_test_path(t.dir, "t.db");
    t.diag = sl_diag_new();
    ck_assert_int_eq(sl_test_store_open(&t.store, t.db, t.diag), SL_OK);
    return t;
}

static void close_stats_store(stats_store *t)
{
    sl_store_close(t->store);
    sl_diag_free(t->diag);
    free(t->db);
    free(t->json);
    sl_test_rmtree(t->dir);
    free(t->dir);
}

/* The same lot through the library: device fields, flags and their names,
 * the failure-analysis order, an unknown lot, and a history of one lot. */
START_TEST(test_library_analysis)
{
    stats_store t = open_stats_store();
    sl_store *store = t.store;
    sl_diag *diag = t.diag;
    sl_analysis *a = NULL;
    ck_assert_int_eq(sl_analyze_lot(&a, store, "STATS-01", diag), SL_OK);
    ck_assert_uint_eq(a->n_devices, 54); /* 9 wafers x 6 dies */
    ck_assert_uint_eq(a->n_usable, 50);  /* 4 empty v_cnp_V */
    ck_assert_uint_eq(a->n_splits, 5);
    ck_assert_uint_eq(a->n_effects, 4);
    ck_assert_uint_eq(a->n_off_plan, 0);
    size_t outliers = 0, unmeasured = 0;
    for (size_t i = 0; i < a->n_devices; i++) {
        const sl_analyze_device *d = &a->devices[i];
        const char *names[4];
        int n = sl_analyze_flag_names(d, names);
        if (strcmp(d->wafer, "S01") == 0 && strcmp(d->device, "D1") == 0) {
            /* 8.164 V on 90 nm SiO2: C_g = 8.8541878128e-12 * 3.9 / 90e-9 = 3.83681e-4 F/m^2,
             * doping = -3.83681e-4 * 8.164 / 1.602176634e-19 * 1e-4 = -1.955075e12 cm^-2 (by hand) */
            ck_assert(fabs(d->doping_measured_per_cm2 / -1.955075e12 - 1.0) < 1e-6);
            ck_assert(fabs(d->deviation_V - (8.164 - d->cnp_predicted_V)) < 1e-12);
            ck_assert_int_eq(n, 0);
        }
        if (d->flags & SL_FLAG_OUTLIER) {
            ck_assert_str_eq(d->wafer, "S04");
            ck_assert_str_eq(d->device, "D3");
            ck_assert(d->modified_z > 4.5 && d->modified_z < 4.6); /* 4.544, numpy above */
            ck_assert_int_eq(n, 1);
            ck_assert_str_eq(names[0], "outlier");
            outliers++;
        }
        if (d->flags & SL_FLAG_UNMEASURED) {
            ck_assert(isnan(d->cnp_measured_V) && isnan(d->z));
            ck_assert_int_eq(n, 1);
            ck_assert_str_eq(names[0], "unmeasured");
            unmeasured++;
        }
    }
    ck_assert_uint_eq(outliers, 1);
    ck_assert_uint_eq(unmeasured, 4);
    /* failure analysis: the four unmeasured devices before the statistical flag */
    ck_assert_uint_eq(a->n_flagged, 5);
    for (size_t k = 0; k < 4; k++)
        ck_assert(a->devices[a->flagged[k]].flags & SL_FLAG_UNMEASURED);
    ck_assert(a->devices[a->flagged[4]].flags & SL_FLAG_OUTLIER);
    sl_analysis_free(a);

    a = NULL;
    ck_assert_int_eq(sl_analyze_lot(&a, store, "STATS-99", diag), SL_ENOTFOUND);
    ck_assert_ptr_null(a);
    ck_assert_msg(strstr(sl_diag_last(diag), "STATS-01") != NULL, "%s", sl_diag_last(diag));

    sl_history *h = NULL;
    ck_assert_int_eq(sl_analyze_history(&h, store, diag), SL_OK);
    ck_assert_uint_eq(h->n_lots, 1);
    ck_assert_uint_eq(h->n_levels, 4);
    for (size_t i = 0; i < h->n_levels; i++) { /* one lot: pooled = its estimate, no chart */
        ck_assert_uint_eq(h->levels[i].n_points, 1);
        ck_assert(fabs(h->levels[i].pooled.value - h->levels[i].points[0].estimated_per_cm2) <=
                  1e-6 * fabs(h->levels[i].pooled.value));
        ck_assert(isnan(h->levels[i].chart.center));
        ck_assert_uint_eq(h->levels[i].n_drift, 0);
    }
    sl_history_free(h);
    close_stats_store(&t);
}
END_TEST

/* A plan without sigmas and a split left with one usable device: its
 * interval has no width, so the device 2.68 V off is off-prediction (z is
 * infinite, printed as null) while the ox90 devices, 0.27 V at most from
 * their prediction with a spread of their own, are not flagged. */
START_TEST(test_off_prediction_without_spread)
{
    char *dir, row[1024], flags[96];
    char *json = fixture_compare_json("analyze/no-sigma.yaml", "analyze/no-sigma-results.csv",
                                      "NOSIGMA-01", &dir);
    size_t n_flagged = 0;
    for (const char *p = json_array(json, "devices"); json_next_row(&p, row, sizeof row);) {
        char split[32];
        json_str(row, "split", split, sizeof split);
        json_str(row, "flags", flags, sizeof flags);
        if (strcmp(split, "ox90") == 0) {
            ck_assert_msg(flags[0] == '\0', "%s", row);
            ck_assert(fabs(json_num(row, "z")) < 3.0);
        } else if (isfinite(json_num(row, "cnp_measured_V"))) { /* W03 D1 */
            ck_assert_str_eq(flags, "\"off-prediction\"");
            ck_assert(isnan(json_num(row, "z")));
            n_flagged++;
        }
    }
    ck_assert_uint_eq(n_flagged, 1);
    json_row_where(json, "failure_analysis", "reason",
                   "neutrality point 2.68 V below the prediction (neither the plan nor the "
                   "split gives a spread)", row, sizeof row);
    ck_assert(strstr(row, "\"wafer\": \"W03\", \"device\": \"D1\"") != NULL);
    free(json);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

/* ---- the streamed analysis gives what the in-memory one gave ------------------- */

/* compare of the two fixture lots in every format, byte for byte against
 * what splitlot printed before the analysis was streamed (the in-memory
 * analysis and output of commit b3905b4, saved as
 * tests/data/analyze/<lot>-compare.json, .csv and .txt for the table). The
 * no-sigma lot has an infinite z, negative columns and a flagged device that
 * is not an outlier, so still counts in its wafer's mean. */
START_TEST(test_compare_output_unchanged)
{
    static const struct {
        const char *plan, *results, *lot, *format, *expected;
    } cases[] = {
        { "analyze/stats-lot.yaml", "analyze/stats-results.csv", "STATS-01", "json",
          "analyze/stats-compare.json" },
        { "analyze/stats-lot.yaml", "analyze/stats-results.csv", "STATS-01", "csv",
          "analyze/stats-compare.csv" },
        { "analyze/stats-lot.yaml", "analyze/stats-results.csv", "STATS-01", "table",
          "analyze/stats-compare.txt" },
        { "analyze/no-sigma.yaml", "analyze/no-sigma-results.csv", "NOSIGMA-01", "json",
          "analyze/no-sigma-compare.json" },
        { "analyze/no-sigma.yaml", "analyze/no-sigma-results.csv", "NOSIGMA-01", "table",
          "analyze/no-sigma-compare.txt" },
    };
    for (size_t i = 0; i < N_OF(cases); i++) {
        char *dir, *path = sl_test_data(cases[i].expected);
        char *got = fixture_compare(cases[i].plan, cases[i].results, cases[i].lot, cases[i].format,
                                    &dir);
        char *want = sl_test_read_file(path, NULL);
        ck_assert_msg(want != NULL, "cannot read %s", path);
        ck_assert_msg(strcmp(got, want) == 0, "%s --format %s differs from %s:\n%s", cases[i].lot,
                      cases[i].format, path, got);
        free(want);
        free(got);
        free(path);
        sl_test_rmtree(dir);
        free(dir);
    }
}
END_TEST

static void check_same_number(const char *what, double got, double want)
{
    ck_assert_msg(got == want || (isnan(got) && isnan(want)), "%s = %.17g, expected %.17g", what,
                  got, want);
}

static void check_same_device(const sl_analyze_device *got, const sl_analyze_device *want)
{
    ck_assert_int_eq(got->device_id, want->device_id);
    ck_assert_str_eq(got->wafer, want->wafer);
    ck_assert_str_eq(got->device, want->device);
    ck_assert(got->die_x == want->die_x && got->die_y == want->die_y);
    ck_assert_int_eq(got->split, want->split);
    ck_assert_uint_eq(got->flags, want->flags);
    check_same_number("z", got->z, want->z);
    check_same_number("modified z", got->modified_z, want->modified_z);
    check_same_number("doping", got->doping_measured_per_cm2, want->doping_measured_per_cm2);
    ck_assert_str_eq(got->reason, want->reason);
}

/* The stream read device by device against the same lot collected in
 * memory: the summary without devices, every device in order (twice: the
 * reading starts over after the last), the failure-analysis order, a rewind
 * half way, and a stream freed before its end leaving the store usable. */
START_TEST(test_stream_reads_back_the_lot)
{
    stats_store t = open_stats_store();
    sl_store *store = t.store;
    sl_diag *diag = t.diag;
    sl_analysis *a = NULL;
    sl_analysis_stream *s = NULL;
    ck_assert_int_eq(sl_analyze_lot(&a, store, "STATS-01", diag), SL_OK);
    ck_assert_int_eq(sl_analyze_lot_stream(&s, store, "STATS-01", diag), SL_OK);
    const sl_analysis *sum = sl_analysis_stream_summary(s);
    ck_assert(sum->devices == NULL && sum->flagged == NULL);
    ck_assert_uint_eq(sum->n_devices, 54);
    ck_assert(sum->n_devices == a->n_devices && sum->n_usable == a->n_usable &&
              sum->n_flagged == a->n_flagged && sum->n_off_plan == a->n_off_plan);
    check_same_number("anova F", sum->anova.f, a->anova.f);
    for (size_t k = 0; k < sum->n_splits; k++)
        check_same_number("split spread", sum->splits[k].spread_V, a->splits[k].spread_V);
    const sl_analyze_device *d = NULL;
    for (int round = 0; round < 2; round++) {
        for (size_t i = 0; i < a->n_devices; i++) {
            ck_assert_int_eq(sl_analysis_stream_next_device(s, &d, diag), SL_OK);
            ck_assert_ptr_nonnull(d);
            check_same_device(d, &a->devices[i]);
        }
        ck_assert_int_eq(sl_analysis_stream_next_device(s, &d, diag), SL_OK);
        ck_assert_ptr_null(d);
    }
    for (size_t k = 0; k < a->n_flagged; k++) {
        ck_assert_int_eq(sl_analysis_stream_next_flagged(s, &d, diag), SL_OK);
        ck_assert_ptr_nonnull(d);
        check_same_device(d, &a->devices[a->flagged[k]]);
    }
    ck_assert_int_eq(sl_analysis_stream_next_flagged(s, &d, diag), SL_OK);
    ck_assert_ptr_null(d);
    for (int i = 0; i < 3; i++)
        ck_assert_int_eq(sl_analysis_stream_next_device(s, &d, diag), SL_OK);
    sl_analysis_stream_rewind(s);
    ck_assert_int_eq(sl_analysis_stream_next_device(s, &d, diag), SL_OK);
    check_same_device(d, &a->devices[0]);
    sl_analysis_stream_free(s);
    sl_analysis_free(a);
    a = NULL;
    ck_assert_int_eq(sl_analyze_lot(&a, store, "STATS-01", diag), SL_OK);
    ck_assert_uint_eq(a->n_devices, 54);
    sl_analysis_free(a);
    close_stats_store(&t);
}
END_TEST

/* ---- a simulated lot end to end ------------------------------------------------ */

typedef struct {
    char wafer[16], device[16], flags[96];
    long die_x, die_y;
} out_row;

static out_row *read_rows(const char *json, const char *array, size_t *n)
{
    size_t cap = 64;
    out_row *rows = malloc(cap * sizeof *rows);
    char line[2048];
    *n = 0;
    for (const char *p = json_array(json, array); json_next_row(&p, line, sizeof line);) {
        if (*n == cap)
            rows = realloc(rows, (cap *= 2) * sizeof *rows);
        out_row *o = &rows[(*n)++];
        json_str(line, "wafer", o->wafer, sizeof o->wafer);
        json_str(line, "device", o->device, sizeof o->device);
        o->die_x = (long)json_num(line, "die_x");
        o->die_y = (long)json_num(line, "die_y");
        o->flags[0] = '\0';
        if (strstr(line, "\"flags\": "))
            json_str(line, "flags", o->flags, sizeof o->flags);
    }
    return rows;
}

static const out_row *find_row(const out_row *rows, size_t n, const char *wafer, const char *device)
{
    for (size_t i = 0; i < n; i++)
        if (strcmp(rows[i].wafer, wafer) == 0 && strcmp(rows[i].device, device) == 0)
            return &rows[i];
    return NULL;
}

static int is_faulty(const char *kind)
{
    return strcmp(kind, "short") == 0 || strcmp(kind, "open") == 0 ||
           strcmp(kind, "cnp-outside-sweep") == 0 || strcmp(kind, "poor-fit") == 0;
}

/* One seed: anneal-350 delivers 0.2e12 of the planned 1.2e12 cm^-2, 4 % of
 * the devices are faulty (the simulator's default also shifts 0.5 % by 3 V). */
static void end_to_end(const char *seed)
{
    char *dir = sl_test_tmpdir();
    const char *extra[] = { "--fault-fraction", "0.04", "--true-doping", "anneal-350=0.2e12", NULL };
    demo_lot(dir, "DEMO-01", seed, extra, 1);
    const char *compare[] = { "compare", "--lot", "DEMO-01", "--db", "t.db", "--format", "json", NULL };
    sl_run_result r = run_ok(dir, compare);

    /* exactly the anneal level is off-plan, and its estimate finds the truth */
    char row[1024], flags[96];
    size_t n_off = 0;
    for (const char *p = json_array(r.out, "effects"); json_next_row(&p, row, sizeof row);) {
        char level[64];
        json_str(row, "level", level, sizeof level);
        json_str(row, "flags", flags, sizeof flags);
        int anneal = strcmp(level, "anneal-350") == 0;
        ck_assert_msg(anneal == (strcmp(flags, "\"off-plan\"") == 0), "seed %s: %s flags [%s]",
                      seed, level, flags);
        n_off += anneal;
        if (anneal) /* true effect 0.2e12 - 0 (levels.csv); within 4 standard errors */
            ck_assert_msg(fabs(json_num(row, "estimated_per_cm2") - 0.2e12) <
                              4.0 * json_num(row, "stderr_per_cm2"), "seed %s: %s", seed, row);
    }
    ck_assert_uint_eq(n_off, 1);
    ck_assert_int_eq((int)json_num(r.out, "levels_off_plan"), 1);

    size_t n_truth, n_dev, n_fa;
    char *sim = sl_test_path(dir, "sim-DEMO-01");
    truth_row *truth = read_truth(sim, &n_truth);
    out_row *dev = read_rows(r.out, "devices", &n_dev);
    out_row *fa = read_rows(r.out, "failure_analysis", &n_fa);
    size_t n_faulty = 0, n_good = 0, n_false = 0;
    for (size_t i = 0; i < n_truth; i++) {
        const truth_row *t = &truth[i];
        if (is_faulty(t->kind)) { /* listed for failure analysis where it sits */
            const out_row *o = find_row(fa, n_fa, t->wafer, t->device);
            ck_assert_msg(o != NULL, "seed %s: faulty %s %s (%s) not listed", seed, t->wafer,
                          t->device, t->kind);
            ck_assert(o->die_x == t->die_x && o->die_y == t->die_y);
            n_faulty++;
        } else if (strcmp(t->kind, "good") == 0) {
            const out_row *o = find_row(dev, n_dev, t->wafer, t->device);
            ck_assert_msg(o != NULL, "seed %s: good %s %s not stored", seed, t->wafer, t->device);
            n_good++;
            n_false += o->flags[0] != '\0';
        }
    }
    ck_assert_uint_gt(n_faulty, 0);
    ck_assert_uint_gt(n_good, 400); /* 16 x 36 = 576 dies x (0.85 - 0.005 shifted): about 487 */
    ck_assert_msg(n_false * 100 < n_good, "seed %s: %zu of %zu good devices flagged", seed,
                  n_false, n_good);
    free(truth);
    free(dev);
    free(fa);
    free(sim);
    sl_run_result_free(&r);
    sl_test_rmtree(dir);
    free(dir);
}

START_TEST(test_end_to_end_off_plan_and_faults)
{
    static const char *const seeds[] = { "3", "17", "2029" };
    for (size_t i = 0; i < N_OF(seeds); i++)
        end_to_end(seeds[i]);
}
END_TEST

/* ---- history across lots ---------------------------------------------------------- */

/* Three demo lots; the third gets cap-pmma 1.5e12 instead of the planned 0.4e12. */
static void drift_lots(const char *dir, int first_seed)
{
    static const char *const none[] = { NULL };
    static const char *const drifted[] = { "--true-doping", "cap-pmma=1.5e12", NULL };
    for (int i = 1; i <= 3; i++) {
        char lot[16], seed[16];
        snprintf(lot, sizeof lot, "DRIFT-0%d", i);
        snprintf(seed, sizeof seed, "%d", first_seed + i);
        demo_lot(dir, lot, seed, i == 3 ? drifted : none, 0);
    }
}

static int by_value(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* A level's pooled value and chart recomputed from its per-lot estimates in
 * the history JSON: inverse-variance pooling over the first n_base lots (the
 * ones that did not drift; a drifted lot is left out), x_p = sum(x/se^2)
 * / sum(1/se^2), se_p = sum(1/se^2)^-1/2 (the textbook fixed-effect pool);
 * the chart over the first n_base lots (those not flagged): centre = mean,
 * sigma = average moving range / 1.128 (Montgomery, Introduction to Statistical
 * Quality Control), floored at the median standard error (analyze_history.c's
 * documented guard), limits centre -/+ 3 sigma. Tolerance 1e4 cm^-2: the
 * inputs are printed to 10 significant digits. */
static void check_level_history(const char *json, const char *level, size_t n_base)
{
    double x[8], se[8], row_se[8], sw = 0.0, swx = 0.0;
    size_t n = 0;
    char row[1024], got[64];
    for (const char *p = json_array(json, "estimates"); json_next_row(&p, row, sizeof row);) {
        json_str(row, "level", got, sizeof got);
        if (strcmp(got, level) != 0)
            continue;
        ck_assert_uint_lt(n, 8);
        x[n] = json_num(row, "estimated_per_cm2");
        se[n] = row_se[n] = json_num(row, "stderr_per_cm2");
        n++;
    }
    for (size_t i = 0; i < n_base; i++) { /* pooled over the lots in control */
        sw += 1.0 / (se[i] * se[i]);
        swx += x[i] / (se[i] * se[i]);
    }
    ck_assert_uint_ge(n, n_base);
    json_row_where(json, "levels", "level", level, row, sizeof row);
    ck_assert(fabs(json_num(row, "pooled_per_cm2") - swx / sw) < 1e4);
    ck_assert(fabs(json_num(row, "pooled_stderr_per_cm2") - 1.0 / sqrt(sw)) < 1e4);
    double centre = 0.0, mr = 0.0;
    for (size_t i = 0; i < n_base; i++) {
        centre += x[i] / (double)n_base;
        if (i > 0)
            mr += fabs(x[i] - x[i - 1]) / (double)(n_base - 1);
    }
    qsort(row_se, n_base, sizeof row_se[0], by_value);
    double median_se = n_base % 2 ? row_se[n_base / 2]
                                  : 0.5 * (row_se[n_base / 2 - 1] + row_se[n_base / 2]);
    double sigma = fmax(mr / 1.128, median_se), lo = NAN, hi = NAN;
    ck_assert(sscanf(json_find(row, "limits_per_cm2"), "[%lf, %lf]", &lo, &hi) == 2);
    ck_assert_msg(fabs(json_num(row, "center_per_cm2") - centre) < 1e4, "%s: %s", level, row);
    ck_assert_msg(fabs(lo - (centre - 3.0 * sigma)) < 1e4 && fabs(hi - (centre + 3.0 * sigma)) < 1e4,
                  "%s: %s", level, row);
}

START_TEST(test_history_flags_drift)
{
    static const int first_seeds[] = { 40, 700 };
    for (size_t s = 0; s < N_OF(first_seeds); s++) {
        char *dir = sl_test_tmpdir(), row[1024];
        drift_lots(dir, first_seeds[s]);
        const char *history[] = { "history", "--db", "t.db", "--format", "json", NULL };
        sl_run_result r = run_ok(dir, history);
        ck_assert_int_eq((int)json_num(r.out, "lots"), 3);
        size_t n = 0, n_drift = 0;
        for (const char *p = json_array(r.out, "estimates"); json_next_row(&p, row, sizeof row); n++) {
            char lot[32], level[64], flags[64];
            json_str(row, "lot", lot, sizeof lot);
            json_str(row, "level", level, sizeof level);
            json_str(row, "flags", flags, sizeof flags);
            int want = strcmp(lot, "DRIFT-03") == 0 && strcmp(level, "cap-pmma") == 0;
            ck_assert_msg(want == (strcmp(flags, "\"drift\"") == 0), "seeds %d: %s %s [%s]",
                          first_seeds[s], lot, level, flags);
            n_drift += want;
        }
        ck_assert_uint_eq(n, 12); /* 4 levels (intercept included) x 3 lots */
        ck_assert_uint_eq(n_drift, 1);
        json_row_where(r.out, "levels", "level", "cap-pmma", row, sizeof row);
        ck_assert_int_eq((int)json_num(row, "drift_lots"), 1);
        json_row_where(r.out, "levels", "level", "anneal-350", row, sizeof row);
        ck_assert_int_eq((int)json_num(row, "drift_lots"), 0);
        check_level_history(r.out, "baseline", 3);
        check_level_history(r.out, "alox20", 3);
        check_level_history(r.out, "anneal-350", 3);
        check_level_history(r.out, "cap-pmma", 2); /* the chart leaves the drifted lot out */
        sl_run_result_free(&r);
        sl_test_rmtree(dir);
        free(dir);
    }
}
END_TEST

/* A plan without the blocks --emit-yaml writes, then the emitted YAML. */
static char *plan_with_calibration(const char *path, const char *yaml)
{
    static const char *const dropped[] = { "baseline_doping_per_cm2:", "dielectrics:",
                                           "treatments:", "materials:" };
    char *text = sl_test_read_file(path, NULL);
    ck_assert(text != NULL);
    size_t cap = strlen(text) + strlen(yaml) + 2, n = 0;
    char *out = malloc(cap);
    int skipping = 0;
    for (char *line = text; *line;) {
        char *end = strchr(line, '\n');
        size_t len = end ? (size_t)(end - line) + 1 : strlen(line);
        if (line[0] != ' ' && line[0] != '-' && line[0] != '#' && line[0] != '\n') {
            skipping = 0; /* a top-level key ends the block before it */
            for (size_t k = 0; k < N_OF(dropped); k++)
                skipping |= strncmp(line, dropped[k], strlen(dropped[k])) == 0;
        }
        if (!skipping) {
            memcpy(out + n, line, len);
            n += len;
        }
        line += len;
    }
    snprintf(out + n, cap - n, "%s", yaml);
    free(text);
    return out;
}

START_TEST(test_emit_yaml_round_trip)
{
    static const char *const under[] = { "--true-doping", "anneal-350=0.9e12", NULL };
    char *dir = sl_test_tmpdir(), row[1024];
    for (int i = 1; i <= 3; i++) {
        char lot[16], seed[16];
        snprintf(lot, sizeof lot, "CAL-0%d", i);
        snprintf(seed, sizeof seed, "%d", 60 + i);
        demo_lot(dir, lot, seed, under, 0);
    }
    const char *emit[] = { "history", "--db", "t.db", "--emit-yaml", NULL };
    sl_run_result y = run_ok(dir, emit);
    ck_assert(strstr(y.out, "baseline_doping_per_cm2:") && strstr(y.out, "\ndielectrics:\n") &&
              strstr(y.out, "\ntreatments:\n"));

    char *demo = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *plan = plan_with_calibration(demo, y.out);
    free(demo);
    ck_assert(strstr(plan, "mean: 1.2e12") == NULL); /* the planned anneal is gone */
    char *plan_path = sl_test_path(dir, "next.yaml");
    ck_assert_int_eq(sl_test_write_file(plan_path, plan), 0);
    const char *check[] = { "check", "next.yaml", NULL };
    sl_run_result c = sl_test_run(dir, NULL, check);
    ck_assert_msg(c.exit_code == 0, "check: %s%s\n--- plan:\n%s", c.out, c.err, plan);
    sl_run_result_free(&c);

    /* calibrated anneal against what the lots delivered (levels.csv of the
     * simulation: 9e+11) and the pooled standard error history reports */
    const char *anneal = strstr(y.out, "name: anneal-350, doping_per_cm2: { mean: ");
    ck_assert(anneal != NULL);
    double mean = strtod(anneal + strlen("name: anneal-350, doping_per_cm2: { mean: "), NULL);
    char *levels_path = sl_test_path(dir, "sim-CAL-01/levels.csv");
    char *levels = sl_test_read_file(levels_path, NULL);
    ck_assert(levels && strstr(levels, "treatment,anneal-350,1.2e+12,3e+11,9e+11\n"));
    const char *history[] = { "history", "--db", "t.db", "--format", "json", NULL };
    sl_run_result h = run_ok(dir, history);
    json_row_where(h.out, "levels", "level", "anneal-350", row, sizeof row);
    double se = json_num(row, "pooled_stderr_per_cm2");
    ck_assert(se > 0.0 && se < 1e11);
    ck_assert_msg(fabs(mean - 0.9e12) < 4.0 * se, "calibrated anneal %g, SE %g", mean, se);
    sl_run_result_free(&h);
    free(levels);
    free(levels_path);
    free(plan_path);
    free(plan);
    sl_run_result_free(&y);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

/* Names a plan may hold in quotes come back from --emit-yaml as the same
 * text (tests/data/analyze/odd-names.yaml: ", ", ": ", " #", '"'). */
START_TEST(test_emit_yaml_quotes_names)
{
    char *dir = sl_test_tmpdir(), *source = sl_test_data("analyze/odd-names.yaml");
    const char *predict[] = { "predict", source, "--db", "t.db", NULL };
    run_quiet(dir, predict);
    const char *simulate[] = { "simulate", source, "--out", "sim", "--no-sweeps", NULL };
    run_quiet(dir, simulate);
    const char *ingest[] = { "ingest", "--lot", "ODD-01", "--results", "sim/results.csv",
                             "--db", "t.db", NULL };
    run_quiet(dir, ingest);
    const char *emit[] = { "history", "--db", "t.db", "--emit-yaml", NULL };
    sl_run_result y = run_ok(dir, emit);
    ck_assert_msg(strstr(y.out, "\n  - name: \"alox: 20\"\n") &&
                      strstr(y.out, "\n  - { name: \"anneal 350, N2\", doping_per_cm2: ") &&
                      strstr(y.out, "\n  - { name: \"cap #2\", doping_per_cm2: ") &&
                      strstr(y.out, "{ material: \"hBN, \\\"exfoliated\\\"\", thickness_nm: 5,") &&
                      strstr(y.out, "\n  - { name: \"hBN, \\\"exfoliated\\\"\", relative_permittivity: 3.4,"),
                  "%s", y.out);
    char *plan = plan_with_calibration(source, y.out), *path = sl_test_path(dir, "next.yaml");
    ck_assert_int_eq(sl_test_write_file(path, plan), 0);
    /* the same splits, named from the same level names */
    const char *layout[] = { "layout", "next.yaml", "--format", "json", NULL };
    sl_run_result l = run_ok(dir, layout);
    ck_assert_msg(strstr(l.out, "\"split\": \"alox: 20+anneal 350, N2+cap #2\"") != NULL, "%s", l.out);
    sl_run_result_free(&l);
    free(path);
    free(plan);
    sl_run_result_free(&y);
    free(source);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

/* A level without usable wafers (here every wafer with the cap is left out of
 * the file) is listed without an estimate, and the other levels are still
 * estimated: one empty level must not stop the whole effects fit. */
START_TEST(test_level_without_wafers)
{
    char *dir = sl_test_tmpdir(), *src = sl_test_data("analyze/stats-results.csv");
    char *text = sl_test_read_file(src, NULL), *kept = malloc(strlen(text) + 1), *out = kept;
    for (char *line = strtok(text, "\n"); line; line = strtok(NULL, "\n"))
        if (strncmp(line, "S07,", 4) && strncmp(line, "S08,", 4) && strncmp(line, "S09,", 4))
            out += sprintf(out, "%s\n", line);
    char *path = sl_test_path(dir, "no-cap.csv"), *plan = sl_test_data("analyze/stats-lot.yaml");
    ck_assert_int_eq(sl_test_write_file(path, kept), 0);
    const char *predict[] = { "predict", plan, "--db", "t.db", NULL };
    run_quiet(dir, predict);
    const char *ingest[] = { "ingest", "--lot", "STATS-01", "--results", "no-cap.csv", "--db", "t.db", NULL };
    run_quiet(dir, ingest);
    const char *compare[] = { "compare", "--lot", "STATS-01", "--db", "t.db", "--format", "json", NULL };
    sl_run_result r = run_ok(dir, compare);
    char row[1024];
    size_t estimated = 0, empty = 0;
    for (const char *p = json_array(r.out, "effects"); json_next_row(&p, row, sizeof row);) {
        int has = strstr(row, "\"estimated_per_cm2\": null") == NULL;
        estimated += has;
        empty += !has;
        if (!has)
            ck_assert_msg(strstr(row, "\"wafers\": 0") != NULL, "%s", row);
    }
    ck_assert_uint_eq(empty, 1);    /* the cap level */
    ck_assert_uint_eq(estimated, 3); /* intercept, dielectric, anneal */
    ck_assert(strstr(r.out, "\"effects_note\"") == NULL);
    sl_run_result_free(&r);
    free(plan);
    free(path);
    free(kept);
    free(text);
    free(src);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

static Suite *analyze_suite(void)
{
    Suite *s = suite_create("analyze");
    TCase *stats = tcase_create("statistics");
    tcase_add_test(stats, test_effects_against_numpy_wls);
    tcase_add_test(stats, test_anova_and_ci_against_scipy);
    tcase_add_test(stats, test_library_analysis);
    tcase_add_test(stats, test_off_prediction_without_spread);
    tcase_add_test(stats, test_level_without_wafers);
    tcase_add_test(stats, test_compare_output_unchanged);
    tcase_add_test(stats, test_stream_reads_back_the_lot);
    suite_add_tcase(s, stats);
    TCase *lots = tcase_create("simulated lots");
    tcase_set_timeout(lots, 300);
    tcase_add_test(lots, test_end_to_end_off_plan_and_faults);
    tcase_add_test(lots, test_history_flags_drift);
    tcase_add_test(lots, test_emit_yaml_round_trip);
    tcase_add_test(lots, test_emit_yaml_quotes_names);
    suite_add_tcase(s, lots);
    return s;
}

int main(void) { return sl_test_main(analyze_suite()); }
