/* SPDX-License-Identifier: MIT
 * Tests of `splitlot simulate`: a seed reproduces the files exactly and
 * another seed does not, --true-doping overrides reach levels.csv, an unknown
 * level is refused, the files hold every wafer x device of the plan, and
 * the variation block's load, wafer and device scatter reach the truth.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/store.h"
#include "test_support.h"

#define DEMO_PLAN SL_SOURCE_DIR "/plans/demo.yaml"

static void drop_dir(char *dir)
{
    sl_test_rmtree(dir);
    free(dir);
}

static size_t count_lines(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

static sl_run_result simulate(const char *dir, const char *out, const char *seed,
                              const char *extra1, const char *extra2)
{
    const char *argv[] = { "simulate", DEMO_PLAN, "--out", out, "--seed", seed, extra1, extra2,
                           NULL };
    return sl_test_run(dir, NULL, argv);
}

static int same_file(const char *dir, const char *a, const char *b)
{
    char *x = sl_test_path(dir, a), *y = sl_test_path(dir, b);
    int eq = sl_test_files_equal(x, y);
    free(x);
    free(y);
    return eq;
}

static const char *const outputs[] = { "results.csv", "sweeps.csv", "truth.csv", "levels.csv" };

START_TEST(seed_reproduces)
{
    char *dir = sl_test_tmpdir();
    sl_run_result r = simulate(dir, "a", "7", NULL, NULL);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    r = simulate(dir, "b", "7", NULL, NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    r = simulate(dir, "c", "8", NULL, NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    for (size_t i = 0; i < 4; i++) {
        char a[64], b[64], c[64];
        snprintf(a, sizeof a, "a/%s", outputs[i]);
        snprintf(b, sizeof b, "b/%s", outputs[i]);
        snprintf(c, sizeof c, "c/%s", outputs[i]);
        ck_assert_msg(same_file(dir, a, b), "%s differs for the same seed", outputs[i]);
        /* levels deliver their planned means by default: levels.csv is the
         * same for any seed; the drawn files are not */
        if (strcmp(outputs[i], "levels.csv") == 0)
            ck_assert(same_file(dir, a, c));
        else
            ck_assert_msg(!same_file(dir, a, c), "%s is the same for seeds 7 and 8", outputs[i]);
    }
    /* --draw-levels draws the levels from the seed */
    r = simulate(dir, "d", "7", "--draw-levels", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    r = simulate(dir, "e", "8", "--draw-levels", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    ck_assert(!same_file(dir, "d/levels.csv", "e/levels.csv"));
    drop_dir(dir);
}
END_TEST

START_TEST(true_doping_overrides)
{
    char *dir = sl_test_tmpdir();
    sl_run_result r = simulate(dir, "o", "7", "--true-doping", "anneal-350=0.6e12");
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    char *path = sl_test_path(dir, "o/levels.csv");
    char *levels = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(levels);
    /* planned 1.2e12 +/- 0.3e12 in plans/demo.yaml, true value as overridden */
    ck_assert_msg(strstr(levels, "treatment,anneal-350,1.2e+12,3e+11,6e+11\n") != NULL, "%s",
                  levels);
    /* untouched levels keep their planned means */
    ck_assert(strstr(levels, "treatment,cap-pmma,4e+11,2e+11,4e+11\n") != NULL);
    ck_assert(strstr(levels, "baseline,baseline,-2e+12,8e+11,-2e+12\n") != NULL);
    free(levels);
    free(path);

    /* baseline and dielectrics can be overridden too */
    r = simulate(dir, "p", "7", "--true-doping", "baseline=-1e12");
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    path = sl_test_path(dir, "p/levels.csv");
    levels = sl_test_read_file(path, NULL);
    ck_assert(strstr(levels, "baseline,baseline,-2e+12,8e+11,-1e+12\n") != NULL);
    free(levels);
    free(path);
    drop_dir(dir);
}
END_TEST

START_TEST(unknown_level_refused)
{
    char *dir = sl_test_tmpdir();
    sl_run_result r = simulate(dir, "u", "7", "--true-doping", "anneal-305=1e12");
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_int_eq(count_lines(r.err), 1);
    ck_assert_msg(strstr(r.err, "'anneal-305' is not a dielectric, treatment or 'baseline'"), "%s",
                  r.err);
    ck_assert_str_eq(r.out, "");
    sl_run_result_free(&r);
    static const char *bad[][2] = {
        { "--true-doping", "anneal-350" },      /* no value */
        { "--true-doping", "anneal-350=lots" }, /* not a number */
        { "--noise-rel", "1.5" },               /* not a fraction */
        { "--points", "7" },                    /* fewer than a fit needs */
        { "--seed", "4294967303" },             /* 2^32 + 7: would repeat seed 7 */
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        r = simulate(dir, "v", "7", bad[i][0], bad[i][1]);
        ck_assert_msg(r.exit_code == 2, "case %zu: exit %d", i, r.exit_code);
        ck_assert_msg(count_lines(r.err) == 1, "case %zu: '%s'", i, r.err);
        sl_run_result_free(&r);
    }
    const char *no_out[] = { "simulate", DEMO_PLAN, NULL };
    r = sl_test_run(dir, NULL, no_out);
    ck_assert_int_eq(r.exit_code, 2);
    sl_run_result_free(&r);
    drop_dir(dir);
}
END_TEST

/* Data lines of a file (header aside) and those naming a wafer. */
static size_t data_lines(const char *dir, const char *name, const char *wafer, size_t *on_wafer)
{
    char *path = sl_test_path(dir, name);
    char *text = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(text);
    size_t n = count_lines(text) - 1;
    char key[32];
    snprintf(key, sizeof key, "\n%s,", wafer);
    *on_wafer = 0;
    for (const char *p = text; (p = strstr(p, key)) != NULL; p++)
        ++*on_wafer;
    free(text);
    free(path);
    return n;
}

/* Truth lines of one device kind, and those of them on a wafer. */
static size_t kind_lines(const char *dir, const char *name, const char *kind, const char *wafer,
                         size_t *on_wafer)
{
    char *path = sl_test_path(dir, name);
    char *text = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(text);
    char key[64], wafer_key[32];
    snprintf(key, sizeof key, ",%s,", kind);
    snprintf(wafer_key, sizeof wafer_key, "%s,", wafer);
    size_t n = 0;
    *on_wafer = 0;
    for (char *line = strtok(text, "\n"); line; line = strtok(NULL, "\n"))
        if (strstr(line, key)) {
            n++;
            *on_wafer += strncmp(line, wafer_key, strlen(wafer_key)) == 0;
        }
    free(text);
    free(path);
    return n;
}

START_TEST(counts_match_plan)
{
    char *dir = sl_test_tmpdir();
    sl_run_result r = simulate(dir, "s", "3", NULL, NULL);
    ck_assert_int_eq(r.exit_code, 0);
    /* plans/demo.yaml: 16 wafers in splits (18 minus the 2 spares) x 36 devices = 576 */
    ck_assert_msg(strstr(r.out, "16 wafers, 576 devices") != NULL, "%s", r.out);
    sl_run_result_free(&r);
    size_t w = 0, w01 = 0;
    ck_assert_uint_eq(data_lines(dir, "s/truth.csv", "W04", &w), 576);
    ck_assert_uint_eq(w, 0); /* W04 is a spare in the demo layout */
    /* devices lost to yield (kind 'unprobed' in the truth) were never probed:
     * results.csv and sweeps.csv hold every other device at each of the
     * plan's two temperatures, 201 points a sweep */
    size_t unprobed = kind_lines(dir, "s/truth.csv", "unprobed", "W01", &w01);
    ck_assert_uint_gt(unprobed, 0); /* expected yield 0.85 */
    ck_assert_uint_eq(data_lines(dir, "s/results.csv", "W01", &w), 2 * (576 - unprobed));
    ck_assert_uint_eq(w, 2 * (36 - w01));
    size_t sweeps = data_lines(dir, "s/sweeps.csv", "W01", &w);
    ck_assert_uint_eq(sweeps, 2 * 201 * (576 - unprobed));
    ck_assert_uint_eq(w, 2 * 201 * (36 - w01));

    r = simulate(dir, "t", "3", "--devices-per-wafer", "20");
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    ck_assert_uint_eq(data_lines(dir, "t/truth.csv", "W16", &w), 16 * 20);
    ck_assert_uint_eq(w, 20);
    r = simulate(dir, "n", "3", "--no-sweeps", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    char *none = sl_test_path(dir, "n/sweeps.csv");
    ck_assert_ptr_null(fopen(none, "rb"));
    free(none);
    drop_dir(dir);
}
END_TEST

/* Only load-to-load scatter (wafer sigma 1 cm^-2, device sigma 0, no thickness scatter):
 * the wafers of one load share their doping, loads differ, and wafers that
 * skip the batched step all have the planned doping. */
static const char batched_plan[] =
    "lot: SIM-B\n"
    "temperatures_K: [300]\n"
    "dielectrics: [ { name: ox, layers: [ { material: SiO2, thickness_nm: 90 } ] } ]\n"
    "treatments: [ { name: t, doping_per_cm2: { mean: 1e12 } } ]\n"
    "design: { kind: full-factorial, factors: { dielectric: [ox], step: [none, t] },\n"
    "          wafers_per_split: 4 }\n"
    "batches: [ { step: t, capacity: 2 } ]\n"
    "variation: { wafer_sigma_per_cm2: 1, device_sigma_V: 0, batch_sigma_per_cm2: 3e11 }\n"
    "wafers: 8\n"
    "devices_per_wafer: 3\n"
    "seed: 5\n";

/* Doping of each wafer from truth.csv (column 11), -1e30 where devices disagree. */
static void wafer_doping(const char *truth, const sl_plan *plan, double *doping)
{
    for (size_t w = 0; w < plan->n_wafers; w++)
        doping[w] = NAN;
    const char *line = strchr(truth, '\n');
    while (line && line[1]) {
        line++;
        char wafer[32] = "";
        double value = 0.0;
        const char *field = line;
        sscanf(field, "%31[^,]", wafer);
        for (int k = 0; k < 10 && field; k++)
            field = strchr(field, ',') ? strchr(field, ',') + 1 : NULL;
        ck_assert_ptr_nonnull(field);
        value = strtod(field, NULL);
        long w = sl_plan_wafer_index(plan, wafer);
        ck_assert_int_ge(w, 0);
        if (isnan(doping[w]))
            doping[w] = value;
        else if (fabs(doping[w] - value) > 1e6)
            doping[w] = -1e30;
        line = strchr(line, '\n');
    }
}

START_TEST(load_scatter_shared_by_a_load)
{
    char *dir = sl_test_tmpdir();
    char *plan_path = sl_test_path(dir, "b.yaml");
    FILE *f = fopen(plan_path, "w");
    fputs(batched_plan, f);
    fclose(f);
    const char *argv[] = { "simulate", plan_path, "--out", "o", "--seed", "3", NULL };
    sl_run_result r = sl_test_run(dir, NULL, argv);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_layout *l = NULL;
    ck_assert_int_eq(sl_plan_load(&plan, plan_path, diag), SL_OK);
    ck_assert_int_eq(sl_layout_build(&l, plan, diag), SL_OK);
    char *truth_path = sl_test_path(dir, "o/truth.csv");
    char *truth = sl_test_read_file(truth_path, NULL);
    double doping[8];
    wafer_doping(truth, plan, doping);
    /* baseline 0 + dielectric 0 + t 1e12 = 1e12, plus the load's offset */
    double load_doping[3] = { NAN, NAN, NAN };
    for (size_t w = 0; w < 8; w++) {
        ck_assert(doping[w] > -1e29); /* one value per wafer: no device scatter */
        size_t load = l->wafers[w].load[0];
        if (load == 0) {
            ck_assert_double_eq_tol(doping[w], 0.0, 1e6);
            continue;
        }
        ck_assert_uint_le(load, 2);
        if (isnan(load_doping[load]))
            load_doping[load] = doping[w];
        ck_assert_double_eq_tol(doping[w], load_doping[load], 1e6);
    }
    ck_assert(fabs(load_doping[1] - load_doping[2]) > 1e9);
    ck_assert(fabs(load_doping[1] - 1e12) > 1e9); /* an offset was drawn */
    free(truth);
    free(truth_path);
    sl_layout_free(l);
    sl_plan_free(plan);
    sl_diag_free(diag);
    free(plan_path);
    drop_dir(dir);
}
END_TEST

/* Every probed device at both of the demo plan's temperatures, 300 then 77
 * K: the same neutrality point (within the 0.02 V noise of a results row),
 * the residual density with the 77 K thermal floor in place of the 300 K
 * one, n0(77)^2 = n0(300)^2 - n_th(300)^2 + n_th(77)^2; --temperature-K
 * keeps one temperature, and one the plan lacks is refused. */
/* A plan with device_types: each device's type in a device_type column of
 * sweeps, results and truth, its curve drawn with its type's channel, so
 * that the imported lot's mobility comes back per type (within 5 % of the
 * drawn value on 90 nm SiO2, where the fit's density model is the
 * simulation's). */
START_TEST(device_types_come_back)
{
    char *dir = sl_test_tmpdir();
    char *plan = sl_test_data("instrument/types.yaml");
    const char *predict[] = { "predict", plan, "--db", "t.db", NULL };
    sl_run_result r = sl_test_run(dir, NULL, predict);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    const char *sim[] = { "simulate", plan, "--out", "sim", "--seed", "3", NULL };
    r = sl_test_run(dir, NULL, sim);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    const char *ingest[] = { "ingest", "--lot", "INST-TYPES", "--sweeps", "sim/sweeps.csv",
                             "--db", "t.db", NULL };
    r = sl_test_run(dir, NULL, ingest);
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    sl_run_result_free(&r);
    char *truth_path = sl_test_path(dir, "sim/truth.csv");
    char *truth = sl_test_read_file(truth_path, NULL);
    ck_assert_ptr_nonnull(truth);
    ck_assert_msg(strstr(truth, "gate_capacitance_nF_per_cm2,device_type\n"), "%s", truth);
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_store_lot lot;
    char *db = sl_test_path(dir, "t.db");
    ck_assert_int_eq(sl_test_store_open(&store, db, diag), SL_OK);
    ck_assert_int_eq(sl_store_find_lot(store, &lot, "INST-TYPES", diag), SL_OK);
    sl_store_device_row *rows = NULL;
    size_t n = 0, checked = 0, types_seen = 0;
    ck_assert_int_eq(sl_store_load_devices(store, &rows, &n, lot.lot_id, "final", 300.0, diag),
                     SL_OK);
    char seen[4][16] = { "", "", "", "" };
    for (const char *line = strchr(truth, '\n') + 1; *line; line = strchr(line, '\n') + 1) {
        char wafer[16], name[16], kind[32], type[16];
        double mobility;
        int got = sscanf(line, "%15[^,],%15[^,],%*[^,],%*[^,],%*[^,],%31[^,],%*[^,],%lf,%*[^,],"
                         "%*[^,],%*[^,],%*[^,],%15[^,\n]", wafer, name, kind, &mobility, type);
        ck_assert_int_eq(got, 5);
        for (size_t i = 0; strcmp(kind, "good") == 0 && i < n; i++) {
            if (strcmp(rows[i].wafer, wafer) != 0 || strcmp(rows[i].name, name) != 0)
                continue;
            ck_assert_msg(fabs(rows[i].mobility_cm2_per_Vs / mobility - 1) < 0.05,
                          "%s/%s (%s): mobility %.0f, drawn %.0f cm^2/Vs", wafer, name, type,
                          rows[i].mobility_cm2_per_Vs, mobility);
            checked++;
        }
        size_t k = 0;
        while (k < types_seen && strcmp(seen[k], type) != 0)
            k++;
        if (k == types_seen && k < 4)
            snprintf(seen[types_seen++], sizeof seen[0], "%s", type);
    }
    ck_assert_uint_eq(types_seen, 4); /* L5, L10, L20, L40 */
    ck_assert_msg(checked > 20, "%zu good devices checked", checked);
    free(rows);
    sl_store_lot_clear(&lot);
    sl_store_close(store);
    sl_diag_free(diag);
    free(db);
    free(truth);
    free(truth_path);
    free(plan);
    drop_dir(dir);
}
END_TEST

START_TEST(every_plan_temperature)
{
    /* n_th(T) = (pi/6)(k_B T / hbar v_F)^2 (Fang et al., Appl. Phys. Lett. 91,
     * 092109 (2007)) at v_F = 1e6 m/s, with CODATA 2018 k_B and hbar:
     * 8.0771e10 cm^-2 at 300 K, times (77/300)^2 at 77 K */
    const double floor300 = 8.07710e10, floor77 = floor300 * (77.0 / 300.0) * (77.0 / 300.0);
    char *dir = sl_test_tmpdir();
    sl_run_result r = simulate(dir, "s", "3", "--no-sweeps", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    char *path = sl_test_path(dir, "s/results.csv");
    char *text = sl_test_read_file(path, NULL);
    char *save = NULL, *line = strtok_r(text, "\n", &save);
    size_t pairs = 0, checked = 0;
    char prev[128] = "";
    double prev_v = NAN, prev_n0 = NAN;
    while ((line = strtok_r(NULL, "\n", &save))) {
        char id[128];
        double v = NAN, mu, n0 = NAN, rc, t;
        int k = sscanf(line, "%127[^,],%*[^,],%*[^,],%*[^,],%lf,%lf,%lf,%lf,%lf", id, &v, &mu, &n0,
                       &rc, &t);
        snprintf(id, sizeof id, "%.*s", (int)(strchr(strchr(line, ',') + 1, ',') - line), line);
        if (k < 6) { /* a faulty device: no numbers, at both temperatures too */
            ck_assert(strstr(line, ",,,,300") || strstr(line, ",,,,77"));
            continue;
        }
        if (t == 77.0) {
            ck_assert_str_eq(id, prev); /* right after its 300 K row */
            ck_assert_double_eq_tol(v, prev_v, 0.2);
            if (prev_n0 > 1.2 * floor300) {
                double want = sqrt(prev_n0 * prev_n0 - floor300 * floor300 + floor77 * floor77);
                ck_assert_double_eq_tol(n0 / want, 1.0, 2e-3);
                checked++;
            }
            pairs++;
        } else {
            ck_assert_double_eq(t, 300.0);
            snprintf(prev, sizeof prev, "%s", id);
            prev_v = v;
            prev_n0 = n0;
        }
    }
    ck_assert_uint_gt(pairs, 400);
    ck_assert_uint_gt(checked, 300);
    free(text);
    free(path);
    r = simulate(dir, "o", "3", "--temperature-K", "77");
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
    path = sl_test_path(dir, "o/results.csv");
    text = sl_test_read_file(path, NULL);
    ck_assert_ptr_null(strstr(text, ",300\n"));
    ck_assert_ptr_nonnull(strstr(text, ",77\n"));
    free(text);
    free(path);
    r = simulate(dir, "x", "3", "--temperature-K", "4");
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_msg(strstr(r.err, "temperature 4 K is not one of the plan's temperatures"), "%s",
                  r.err);
    sl_run_result_free(&r);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

static Suite *simulate_suite(void)
{
    Suite *s = suite_create("simulate");
    TCase *tc = tcase_create("simulate");
    tcase_set_timeout(tc, 300);
    tcase_add_test(tc, seed_reproduces);
    tcase_add_test(tc, true_doping_overrides);
    tcase_add_test(tc, unknown_level_refused);
    tcase_add_test(tc, counts_match_plan);
    tcase_add_test(tc, every_plan_temperature);
    tcase_add_test(tc, device_types_come_back);
    tcase_add_test(tc, load_scatter_shared_by_a_load);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(simulate_suite()); }
