/* SPDX-License-Identifier: MIT
 * Tests of predictions: a single-layer and a two-layer stack checked by hand
 * (capacitance, EOT, neutrality voltage and its sigma, derated safe range,
 * density window against the charge balance), and `splitlot predict` (JSON
 * keys, exit codes, revisions, a database left byte for byte when it should be).
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/physics.h"
#include "splitlot/plan.h"
#include "splitlot/predict.h"
#include "test_support.h"

/* Two stacks without a gate range in the plan, so the safe range is derived:
 * 90 nm SiO2, and 20 nm Al2O3 on 10 nm SiO2. Permittivities and breakdown
 * fields are the built-in table of docs/physics.md: SiO2 3.9 / 10 MV/cm,
 * Al2O3 9 / 7 MV/cm. */
static const char two_stacks[] =
    "lot: HAND-01\n"
    "title: hand-checked stacks (invented)\n"
    "graphene: { fermi_velocity_m_s: 1.0e6, disorder_density_per_cm2: 1.5e11 }\n"
    "temperatures_K: [300]\n"
    "device: { channel_length_um: 20, channel_width_um: 10 }\n"
    "wafer_map: { rows: 4, cols: 4 }\n"
    "expected_yield: 0.9\n"
    "baseline_doping_per_cm2: { mean: -2.0e12, sigma: 0.8e12 }\n"
    "dielectrics:\n"
    "  - name: ox90\n"
    "    layers: [ { material: SiO2, thickness_nm: 90, sigma_nm: 2 } ]\n"
    "    doping_per_cm2: { mean: 0, sigma: 0.2e12 }\n"
    "  - name: alox20\n"
    "    layers:\n"
    "      - { material: Al2O3, thickness_nm: 20, sigma_nm: 1 }\n"
    "      - { material: SiO2, thickness_nm: 10, sigma_nm: 0.5 }\n"
    "    doping_per_cm2: { mean: 0.5e12, sigma: 0.3e12 }\n"
    "treatments:\n"
    "  - { name: anneal, doping_per_cm2: { mean: 1.2e12, sigma: 0.3e12 } }\n"
    "design:\n"
    "  kind: full-factorial\n"
    "  factors:\n"
    "    dielectric: [ox90, alox20]\n"
    "    anneal: [none, anneal]\n"
    "  wafers_per_split: 1\n"
    "wafers: 4\n"
    "devices_per_wafer: 16\n"
    "variation: { wafer_sigma_per_cm2: 1.0e11, device_sigma_V: 0.5 }\n"
    "seed: 5\n";

static void drop_dir(char *dir)
{
    sl_test_rmtree(dir);
    free(dir);
}

static sl_plan *load_plan(const char *dir, const char *name, const char *text)
{
    char *path = sl_test_path(dir, name);
    ck_assert_int_eq(sl_test_write_file(path, text), 0);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_status st = sl_plan_load(&plan, path, diag);
    ck_assert_msg(st == SL_OK, "%s", sl_diag_last(diag));
    sl_diag_free(diag);
    free(path);
    return plan;
}

static const sl_prediction *find(const sl_plan *plan, const sl_prediction *pred, size_t n,
                                 const char *split)
{
    long s = sl_plan_split_index(plan, split);
    ck_assert_int_ge(s, 0);
    for (size_t i = 0; i < n; i++)
        if (pred[i].split == (size_t)s)
            return &pred[i];
    ck_abort_msg("no prediction for %s", split);
    return NULL;
}

#define CLOSE(got, want, rel) \
    ck_assert_msg(fabs((got) - (want)) <= (rel) * fabs(want), "%s = %.12g, expected %.12g", #got, \
                  (double)(got), (double)(want))

/* n - p (cm^-2) and E_F (eV) at an end of the range must satisfy the charge
 * balance of docs/physics.md: C_g (V_g - V_cnp) = e (n - p) + C_g E_F. */
static void assert_charge_balance(const sl_prediction *p)
{
    double cg = p->gate_capacitance_F_per_m2, e = SL_SI_ELEMENTARY_CHARGE;
    double top = e * p->max_electron_density_per_cm2 * 1e4 / cg + p->fermi_at_gate_max_eV;
    double bottom = -e * p->max_hole_density_per_cm2 * 1e4 / cg + p->fermi_at_gate_min_eV;
    CLOSE(top, p->gate_max_V - p->cnp_V.val, 1e-9);
    CLOSE(bottom, p->gate_min_V - p->cnp_V.val, 1e-9);
    /* the quantum capacitance takes its share: fewer carriers than C_g dV / e */
    ck_assert(p->max_electron_density_per_cm2 > 0.0 && p->fermi_at_gate_max_eV > 0.0);
    ck_assert(p->max_hole_density_per_cm2 > 0.0 && p->fermi_at_gate_min_eV < 0.0);
    ck_assert(p->max_electron_density_per_cm2 < cg * (p->gate_max_V - p->cnp_V.val) / e * 1e-4);
    ck_assert(p->max_hole_density_per_cm2 < cg * (p->cnp_V.val - p->gate_min_V) / e * 1e-4);
}

START_TEST(single_layer_by_hand)
{
    char *dir = sl_test_tmpdir();
    sl_plan *plan = load_plan(dir, "hand.yaml", two_stacks);
    sl_diag *diag = sl_diag_new();
    sl_prediction *pred = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_predict_plan(&pred, &n, plan, diag), SL_OK);
    ck_assert_uint_eq(n, 4); /* 4 splits x 1 temperature */
    const sl_prediction *p = find(plan, pred, n, "ox90");
    /* C_g = eps0 eps / t = 8.8541878128e-12 * 3.9 / 90e-9 = 3.83681471888e-4 F/m^2
     * (38.3681471888 nF/cm^2); EOT = 3.9 * 90 / 3.9 = 90 nm */
    CLOSE(p->gate_capacitance_F_per_m2, 3.83681471888e-4, 1e-11);
    CLOSE(p->eot_nm, 90.0, 1e-12);
    /* N = -2e12 + 0 cm^-2; sigma_N = sqrt(0.8^2 + 0.2^2) e12 = 8.24621125124e11 */
    CLOSE(p->doping_per_cm2.val, -2.0e12, 1e-15);
    CLOSE(p->doping_per_cm2.sigma, 8.24621125124e11, 1e-11);
    /* V_cnp = -e N / C_g = 1.602176634e-19 * 2e16 / 3.83681471888e-4 = 8.35159762141 V */
    CLOSE(p->cnp_V.val, 8.35159762141, 1e-10);
    /* sigma_C / C = (2 / 3.9) / (90 / 3.9) = 0.0222...; sigma_V^2 = (V sigma_N / N)^2 +
     * (V sigma_C / C)^2 = (8.3516 * 0.41231)^2 + (8.3516 * 0.022222)^2 -> 3.44844966934 V
     * (same sums in mpmath at 20 digits) */
    CLOSE(p->capacitance_rel_sigma, 2.0 / 90.0, 1e-12);
    CLOSE(p->cnp_V.sigma, 3.44844966934, 1e-10);
    /* safe range 0.5 * (3.9 * 10 MV/cm) * (90 nm / 3.9) = 0.5 * 1e9 V/m * 90e-9 m = 45 V */
    ck_assert_int_eq(p->gate_range_from_plan, 0);
    CLOSE(p->gate_max_V, 45.0, 1e-12);
    CLOSE(p->gate_min_V, -45.0, 1e-12);
    ck_assert_int_eq(p->cnp_in_range, 1);
    /* n_th = (pi/6) (k_B T / hbar v_F)^2: k_B T = 4.141947e-21 J, hbar v_F =
     * 1.054571817e-28 J m, ratio 3.927610e7 /m, squared 1.542612e15, times
     * 0.5235988 = 8.07710e14 m^-2 = 8.07710e10 cm^-2 (about 8e10 at 300 K, Fang et
     * al., Appl. Phys. Lett. 91, 092109 (2007)) */
    CLOSE(p->thermal_floor_per_cm2, 8.07710e10, 1e-5);
    /* in gate volts: e n_th / C_g = 1.602177e-19 * 8.07710e14 / 3.836815e-4 = 0.337283 V */
    CLOSE(p->thermal_floor_V, 0.337283, 1e-5);
    /* T* = (hbar v_F / k_B) sqrt(6 n* / pi) = 7.638233e-6 m K * sqrt(6 * 1.5e15 / pi)
     * = 7.638233e-6 * 5.352372e7 = 408.827 K */
    CLOSE(p->disorder_crossover_K, 408.827, 1e-5);
    /* gate efficiency at the neutrality point, (C_g/e) C_q/(C_g + C_q) with
     * C_q = (2 e^2 k_B T / (pi (hbar v_F)^2)) ln 4 = 6.0862968e-3 * 1.3862944
     * = 8.4373989e-3 F/m^2 (0.84 uF/cm^2, about 0.8 per Fang et al. 2007):
     * 2.3947514e15 /m^2/V * 0.95650403 = 2.2905893e11 cm^-2 V^-1 (mpmath, 20 digits) */
    CLOSE(p->gate_efficiency_per_cm2_V, 2.29058934734e11, 1e-9);
    assert_charge_balance(p);

    /* the annealed split adds 1.2e12 +/- 0.3e12: N = -0.8e12, V_cnp = 8.3516 * 0.4 */
    const sl_prediction *q = find(plan, pred, n, "ox90+anneal");
    CLOSE(q->cnp_V.val, 8.35159762141 * 0.4, 1e-10);
    CLOSE(q->doping_per_cm2.sigma, sqrt(0.64 + 0.04 + 0.09) * 1e12, 1e-12);
    free(pred);
    sl_plan_free(plan);
    sl_diag_free(diag);
    drop_dir(dir);
}
END_TEST

START_TEST(two_layers_by_hand)
{
    char *dir = sl_test_tmpdir();
    sl_plan *plan = load_plan(dir, "hand.yaml", two_stacks);
    sl_diag *diag = sl_diag_new();
    sl_prediction *pred = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_predict_plan(&pred, &n, plan, diag), SL_OK);
    const sl_prediction *p = find(plan, pred, n, "alox20+anneal");
    /* sum t/eps = 20/9 + 10/3.9 = 2.2222222 + 2.5641026 = 4.7863248 nm;
     * EOT = 3.9 * 4.7863248 = 8.6666667 + 10 = 18.6666667 nm;
     * C_g = eps0 / 4.7863248e-9 m = 1.84989281089e-3 F/m^2 (184.989 nF/cm^2) */
    CLOSE(p->eot_nm, 18.6666666667, 1e-10);
    CLOSE(p->gate_capacitance_F_per_m2, 1.84989281089e-3, 1e-10);
    /* sigma_C / C = sqrt((1/9)^2 + (0.5/3.9)^2) / 4.7863248 = 0.169654 / 4.7863248
     * = 0.0354454165 */
    CLOSE(p->capacitance_rel_sigma, 0.0354454165023, 1e-10);
    /* N = -2e12 + 0.5e12 + 1.2e12 = -0.3e12; sigma_N = sqrt(0.64 + 0.09 + 0.09) e12
     * = 9.05538513814e11 */
    CLOSE(p->doping_per_cm2.val, -0.3e12, 1e-12);
    CLOSE(p->doping_per_cm2.sigma, 9.05538513814e11, 1e-11);
    /* V_cnp = 1.602176634e-19 * 0.3e16 / 1.84989281089e-3 = 0.259827481555 V;
     * sigma_V = sqrt((e sigma_N / C_g)^2 + (V sigma_C/C)^2) = sqrt(0.784265^2 +
     * 0.0092097^2) = 0.784333377256 V (mpmath, 20 digits) */
    CLOSE(p->cnp_V.val, 0.259827481555, 1e-10);
    CLOSE(p->cnp_V.sigma, 0.784333377256, 1e-10);
    /* safe range: min(9 * 7, 3.9 * 10) = 39 MV/cm = 3.9e9 V/m; times 4.7863248e-9 m
     * = 18.6667 V; derated by 0.5: +/- 9.33333 V */
    ck_assert_int_eq(p->gate_range_from_plan, 0);
    CLOSE(p->gate_max_V, 9.33333333333, 1e-10);
    CLOSE(p->gate_min_V, -9.33333333333, 1e-10);
    ck_assert_int_eq(p->cnp_in_range, 1);
    assert_charge_balance(p);
    /* the thermal floor is a property of graphene, not of the stack */
    CLOSE(p->thermal_floor_per_cm2, find(plan, pred, n, "ox90")->thermal_floor_per_cm2, 1e-15);
    /* the library's own gate range and capacitance calls agree */
    double cg = 0, rel = 0, eot = 0, lo = 0, hi = 0;
    int from_plan = -1;
    size_t d = plan->splits[p->split].dielectric;
    ck_assert_int_eq(sl_predict_gate_capacitance(&cg, &rel, &eot, plan, d), SL_OK);
    ck_assert_double_eq(cg, p->gate_capacitance_F_per_m2);
    sl_predict_gate_range(&lo, &hi, &from_plan, plan, d);
    ck_assert_double_eq(hi, p->gate_max_V);
    ck_assert_int_eq(from_plan, 0);
    free(pred);
    sl_plan_free(plan);
    sl_diag_free(diag);
    drop_dir(dir);
}
END_TEST

START_TEST(plan_gate_range_used)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_load(&plan, SL_SOURCE_DIR "/plans/demo.yaml", diag), SL_OK);
    sl_prediction *pred = NULL;
    size_t n = 0;
    ck_assert_int_eq(sl_predict_plan(&pred, &n, plan, diag), SL_OK);
    ck_assert_uint_eq(n, 16); /* 8 splits x 2 temperatures, split-major */
    ck_assert_double_eq(pred[1].temperature_K, 77.0);
    ck_assert_uint_eq(pred[1].split, 0);
    ck_assert_int_eq(pred[0].gate_range_from_plan, 1);
    ck_assert_double_eq(pred[0].gate_min_V, -40.0);
    ck_assert_double_eq(pred[0].gate_max_V, 40.0);
    for (size_t i = 0; i < n; i++)
        assert_charge_balance(&pred[i]);
    free(pred);
    sl_plan_free(plan);
    sl_diag_free(diag);
}
END_TEST

/* ---- the command ---- */

static size_t count_lines(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

static sl_run_result predict(const char *dir, const char *plan, const char *db, const char *format)
{
    const char *argv[] = { "predict", plan, "--db", db, format ? "--format" : NULL, format, NULL };
    return sl_test_run(dir, NULL, argv);
}

START_TEST(cli_json_keys)
{
    char *dir = sl_test_tmpdir();
    char *path = sl_test_path(dir, "hand.yaml");
    ck_assert_int_eq(sl_test_write_file(path, two_stacks), 0);
    sl_run_result r = predict(dir, "hand.yaml", "t.db", "json");
    ck_assert_msg(r.exit_code == 0, "%s", r.err);
    /* docs/formats.md, predict */
    static const char *const keys[] = {
        "\"lot\": \"HAND-01\"", "\"splits\": [", "\"split\": ", "\"dielectric\": ",
        "\"treatments\": ", "\"temperature_K\": ", "\"gate_capacitance_nF_per_cm2\": ",
        "\"doping_per_cm2\": ", "\"cnp_V\": ", "\"cnp_sigma_V\": ", "\"gate_range_V\": [",
        "\"max_electron_density_per_cm2\": ", "\"max_hole_density_per_cm2\": ",
        "\"thermal_floor_per_cm2\": ", "\"cnp_in_range\": ",
    };
    for (size_t i = 0; i < sizeof keys / sizeof keys[0]; i++)
        ck_assert_msg(strstr(r.out, keys[i]) != NULL, "missing %s", keys[i]);
    /* 38.3681471888 nF/cm^2 by hand (single_layer_by_hand) */
    ck_assert(strstr(r.out, "\"gate_capacitance_nF_per_cm2\": 38.368147") != NULL);
    ck_assert(strstr(r.out, "\"gate_range_V\": [-45, 45]") != NULL);
    ck_assert_str_eq(r.err, "splitlot: lot HAND-01: stored plan as revision 1 in t.db\n");
    sl_run_result_free(&r);
    /* the terminal form carries the safety caution of docs/design.md, "Safety" */
    r = predict(dir, "hand.yaml", "t.db", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "caution:") != NULL);
    sl_run_result_free(&r);
    free(path);
    drop_dir(dir);
}
END_TEST

/* Database and WAL file equal their copies (a missing WAL must stay missing). */
static void assert_db_unchanged(const char *dir, const char *what)
{
    char *db = sl_test_path(dir, "t.db"), *copy = sl_test_path(dir, "copy.db");
    char *wal = sl_test_path(dir, "t.db-wal"), *wal_copy = sl_test_path(dir, "copy.db-wal");
    ck_assert_msg(sl_test_files_equal(db, copy), "%s: database changed", what);
    FILE *a = fopen(wal, "rb"), *b = fopen(wal_copy, "rb");
    ck_assert_msg(!a == !b, "%s: WAL file appeared or vanished", what);
    if (a) {
        fclose(a);
        fclose(b);
        ck_assert_msg(sl_test_files_equal(wal, wal_copy), "%s: WAL changed", what);
    }
    free(db);
    free(copy);
    free(wal);
    free(wal_copy);
}

static void copy_db(const char *dir)
{
    char *db = sl_test_path(dir, "t.db"), *copy = sl_test_path(dir, "copy.db");
    char *wal = sl_test_path(dir, "t.db-wal"), *wal_copy = sl_test_path(dir, "copy.db-wal");
    ck_assert_int_eq(sl_test_copy_file(db, copy), 0);
    remove(wal_copy);
    FILE *f = fopen(wal, "rb");
    if (f) {
        fclose(f);
        ck_assert_int_eq(sl_test_copy_file(wal, wal_copy), 0);
    }
    free(db);
    free(copy);
    free(wal);
    free(wal_copy);
}

START_TEST(cli_rerun_and_revisions)
{
    char *dir = sl_test_tmpdir();
    char *path = sl_test_path(dir, "hand.yaml");
    ck_assert_int_eq(sl_test_write_file(path, two_stacks), 0);
    sl_run_result r = predict(dir, "hand.yaml", "t.db", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);

    /* the same plan again: not a byte changes */
    copy_db(dir);
    r = predict(dir, "hand.yaml", "t.db", "csv");
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_str_eq(r.err, "splitlot: lot HAND-01: plan unchanged, still revision 1 in t.db\n");
    sl_run_result_free(&r);
    assert_db_unchanged(dir, "rerun");

    /* a broken plan: exit 2, the database untouched */
    char *broken = sl_test_path(dir, "broken.yaml");
    char *text = strdup(two_stacks);
    memcpy(strstr(text, "thickness_nm: 90"), "thickness_nm: -9", 16);
    ck_assert_int_eq(sl_test_write_file(broken, text), 0);
    r = predict(dir, "broken.yaml", "t.db", NULL);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_str_eq(r.out, "");
    ck_assert_msg(strncmp(r.err, "broken.yaml:11:", 15) == 0, "%s", r.err);
    sl_run_result_free(&r);
    assert_db_unchanged(dir, "broken plan");
    /* ... and no database is created for it */
    r = predict(dir, "broken.yaml", "fresh.db", NULL);
    ck_assert_int_eq(r.exit_code, 2);
    sl_run_result_free(&r);
    char *fresh = sl_test_path(dir, "fresh.db");
    ck_assert_ptr_null(fopen(fresh, "rb"));
    free(fresh);

    /* a changed plan: revision 2 */
    memcpy(strstr(text, "thickness_nm: -9"), "thickness_nm: 85", 16);
    ck_assert_int_eq(sl_test_write_file(path, text), 0);
    r = predict(dir, "hand.yaml", "t.db", NULL);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_str_eq(r.err, "splitlot: lot HAND-01: stored plan as revision 2 in t.db\n");
    sl_run_result_free(&r);
    free(text);
    free(broken);
    free(path);
    drop_dir(dir);
}
END_TEST

START_TEST(cli_exit_codes)
{
    char *dir = sl_test_tmpdir();
    static const char *cases[][8] = {
        { "predict", NULL },                                          /* no plan */
        { "predict", "a.yaml", "b.yaml", NULL },                      /* two plans */
        { "predict", "a.yaml", "--format", "xml", NULL },
        { "predict", "a.yaml", "--bogus", NULL },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sl_run_result r = sl_test_run(dir, NULL, (const char *const *)cases[i]);
        ck_assert_msg(r.exit_code == 2, "case %zu: exit %d", i, r.exit_code);
        ck_assert_msg(count_lines(r.err) == 1, "case %zu: '%s'", i, r.err);
        ck_assert_str_eq(r.out, "");
        sl_run_result_free(&r);
    }
    /* a plan that cannot be read: exit 1 (I/O), no database created */
    sl_run_result r = predict(dir, "missing.yaml", "t.db", NULL);
    ck_assert_int_eq(r.exit_code, 1);
    ck_assert(strstr(r.err, "missing.yaml") != NULL);
    sl_run_result_free(&r);
    char *db = sl_test_path(dir, "t.db");
    ck_assert_ptr_null(fopen(db, "rb"));
    free(db);
    const char *help[] = { "predict", "--help", NULL };
    r = sl_test_run(dir, NULL, help);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "usage: splitlot predict PLAN") != NULL);
    sl_run_result_free(&r);
    drop_dir(dir);
}
END_TEST

static Suite *predict_suite(void)
{
    Suite *s = suite_create("predict");
    TCase *tc = tcase_create("predict");
    tcase_set_timeout(tc, 300);
    tcase_add_test(tc, single_layer_by_hand);
    tcase_add_test(tc, two_layers_by_hand);
    tcase_add_test(tc, plan_gate_range_used);
    tcase_add_test(tc, cli_json_keys);
    tcase_add_test(tc, cli_rerun_and_revisions);
    tcase_add_test(tc, cli_exit_codes);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(predict_suite()); }
