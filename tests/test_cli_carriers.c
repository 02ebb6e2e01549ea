/* SPDX-License-Identifier: MIT
 * Command-line tests of `splitlot carriers`, --help and --version: the JSON
 * keys of docs/formats.md, exit codes, one clear line per bad option.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "test_support.h"

static size_t count_lines(const char *s)
{
    size_t n = 0;
    for (; *s; s++)
        n += *s == '\n';
    return n;
}

static double json_number(const char *json, const char *key)
{
    char pat[128];
    snprintf(pat, sizeof pat, "\"%s\": ", key);
    const char *p = strstr(json, pat);
    return p ? strtod(p + strlen(pat), NULL) : -1.0;
}

START_TEST(test_fermi_json_keys)
{
    const char *argv[] = { "carriers", "--fermi-eV", "0.1", "--temperature-K", "300",
                           "--format", "json", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, argv);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_str_eq(r.err, "");
    static const char *keys[] = { "electron_density_per_cm2", "hole_density_per_cm2",
                                  "thermal_floor_per_cm2", "quantum_capacitance_uF_per_cm2",
                                  "fermi_level_eV" };
    for (size_t i = 0; i < 5; i++)
        ck_assert_msg(strstr(r.out, keys[i]), "missing %s", keys[i]);
    /* n > p at a positive Fermi level; the floor about 8.1e10 cm^-2 at 300 K
     * (Fang et al., Appl. Phys. Lett. 91, 092109 (2007)) */
    ck_assert(json_number(r.out, "electron_density_per_cm2") > json_number(r.out, "hole_density_per_cm2"));
    ck_assert(fabs(json_number(r.out, "thermal_floor_per_cm2") - 8.1e10) < 0.05e10);
    sl_run_result_free(&r);
}
END_TEST

START_TEST(test_stack_mode)
{
    const char *argv[] = { "carriers", "--stack", "SiO2:90", "--gate-V", "20", "--cnp-V", "2",
                           "--temperature-K", "300", "--format", "json", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, argv);
    ck_assert_int_eq(r.exit_code, 0);
    /* 90 nm SiO2: 38.368 nF/cm^2 by hand (eps0 * 3.9 / 90 nm) */
    ck_assert(fabs(json_number(r.out, "gate_capacitance_nF_per_cm2") - 38.368) < 1e-3);
    /* 18 V above neutrality: net density just below C_g dV / e = 4.31e12 cm^-2 */
    double net = json_number(r.out, "net_density_per_cm2");
    ck_assert(net > 4.2e12 && net < 4.31e12);
    sl_run_result_free(&r);
}
END_TEST

START_TEST(test_csv_and_table)
{
    const char *csv[] = { "carriers", "--fermi-eV", "0", "--format", "csv", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, csv);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "# quantum_capacitance_uF_per_cm2: ") != NULL);
    sl_run_result_free(&r);
    const char *table[] = { "carriers", "--fermi-eV", "0", NULL };
    r = sl_test_run(NULL, NULL, table);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "thermal_floor_per_cm2: 8.077") != NULL);
    sl_run_result_free(&r);
}
END_TEST

/* Each bad invocation: exit 2, exactly one line on stderr, nothing on stdout. */
START_TEST(test_bad_options)
{
    static const char *cases[][8] = {
        { "carriers", "--fermi-eV", "0.1", "--temperature-K", "-5", NULL },
        { "carriers", "--stack", "Unobtainium:90", NULL },
        { "carriers", "--stack", "SiO2:ninety", NULL },
        { "carriers", "--stack", "SiO2", NULL },
        { "carriers", "--fermi-eV", "abc", NULL },
        { "carriers", "--fermi-eV", "1e999", NULL },
        { "carriers", "--fermi-eV", "0.1", "--format", "xml", NULL },
        { "carriers", "--bogus", NULL },
        { "carriers", NULL },
        { "carriers", "--fermi-eV", "0.1", "--stack", "SiO2:90", NULL },
        { "carriers", "--fermi-eV", NULL },
        { "no-such-command", NULL },
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sl_run_result r = sl_test_run(NULL, NULL, (const char *const *)cases[i]);
        ck_assert_msg(r.exit_code == 2, "case %zu: exit %d", i, r.exit_code);
        ck_assert_msg(count_lines(r.err) == 1, "case %zu: stderr '%s'", i, r.err);
        ck_assert_msg(strncmp(r.err, "splitlot: error: ", 17) == 0, "case %zu: '%s'", i, r.err);
        ck_assert_str_eq(r.out, "");
        sl_run_result_free(&r);
    }
}
END_TEST

START_TEST(test_help_and_version)
{
    const char *help[] = { "carriers", "--help", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, help);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "usage: splitlot carriers") != NULL);
    sl_run_result_free(&r);
    const char *top[] = { "--help", NULL };
    r = sl_test_run(NULL, NULL, top);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strstr(r.out, "carriers") != NULL);
    sl_run_result_free(&r);
    const char *version[] = { "--version", NULL };
    r = sl_test_run(NULL, NULL, version);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert(strncmp(r.out, "splitlot ", 9) == 0);
    sl_run_result_free(&r);
}
END_TEST

static Suite *cli_carriers_suite(void)
{
    Suite *s = suite_create("cli_carriers");
    TCase *tc = tcase_create("carriers");
    tcase_add_test(tc, test_fermi_json_keys);
    tcase_add_test(tc, test_stack_mode);
    tcase_add_test(tc, test_csv_and_table);
    tcase_add_test(tc, test_bad_options);
    tcase_add_test(tc, test_help_and_version);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(cli_carriers_suite()); }
