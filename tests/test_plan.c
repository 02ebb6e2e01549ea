/* SPDX-License-Identifier: MIT
 * Tests of the plan module: the example plans parse and normalise as
 * docs/formats.md says, the broken-plan corpus reports each problem at its
 * line:col, hostile YAML is refused cleanly, and `splitlot check` exit codes.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/plan.h"
#include "test_support.h"

static char *plan_file(const char *name)
{
    return sl_test_path(SL_SOURCE_DIR "/plans", name);
}

/* Load a plan that must be free of errors; warnings counted in *warnings. */
static sl_plan *load_ok(const char *path, size_t *warnings)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_status st = sl_plan_load(&plan, path, diag);
    if (st != SL_OK)
        ck_abort_msg("%s: %s: %s", path, sl_status_str(st), sl_diag_last(diag));
    if (warnings)
        *warnings = sl_diag_count(diag, SL_SEV_WARNING);
    sl_diag_free(diag);
    return plan;
}

static sl_plan *parse_ok(const char *text)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_status st = sl_plan_parse(&plan, text, strlen(text), "inline.yaml", diag);
    ck_assert_msg(st == SL_OK, "inline plan: %s", sl_diag_last(diag));
    sl_diag_free(diag);
    return plan;
}

/* ---- the example plans ---- */

START_TEST(example_plans_check_clean)
{
    static const char *const names[] = { "demo.yaml", "rf-highk-topgate.yaml",
                                         "hall-hbn-lowtemp.yaml" };
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++) {
        char *path = plan_file(names[i]);
        size_t warnings = 99;
        sl_plan *plan = load_ok(path, &warnings);
        ck_assert_msg(warnings == 0, "%s has %zu warnings", names[i], warnings);
        ck_assert_uint_gt(plan->n_splits, 0);
        ck_assert_str_eq(plan->factors[0].name, "dielectric");
        sl_plan_free(plan);
        free(path);
    }
}
END_TEST

START_TEST(demo_plan_values)
{
    char *path = plan_file("demo.yaml");
    sl_plan *p = load_ok(path, NULL);
    ck_assert_str_eq(p->lot, "DEMO-01");
    ck_assert_int_eq(p->design_kind, SL_DESIGN_FULL_FACTORIAL);
    ck_assert_uint_eq(p->n_temperatures, 2);
    ck_assert_double_eq(p->temperatures_K[1], 77.0);
    ck_assert_int_eq(p->wafer_rows, 6);
    ck_assert_int_eq(p->devices_per_wafer, 36);
    ck_assert_uint_eq(p->seed, 2026);
    ck_assert_double_eq(p->gate_derating, 0.5);
    ck_assert_int_eq(p->resolve.present, 1);
    ck_assert_double_eq(p->resolve.shift_per_cm2, 3.0e11);
    ck_assert_double_eq(p->resolve.shift_V, 0.0);
    ck_assert_int_eq(p->variation.present, 1);
    ck_assert_double_eq(p->variation.wafer_sigma_per_cm2, 1.0e11);
    ck_assert_double_eq(p->variation.device_sigma_V, 0.6);
    /* 2 dielectrics x anneal (none, anneal-350) x cap (none, cap-pmma) */
    ck_assert_uint_eq(p->n_factors, 3);
    ck_assert_uint_eq(p->n_splits, 8);
    ck_assert_uint_eq(p->n_wafers, 18);
    ck_assert_str_eq(p->wafers[0], "W01");
    ck_assert_str_eq(p->wafers[17], "W18");
    ck_assert_str_eq(p->splits[0].name, "ox90");
    ck_assert_str_eq(p->splits[3].name, "ox90+anneal-350+cap-pmma");
    ck_assert_str_eq(p->splits[7].name, "alox20+anneal-350+cap-pmma");
    ck_assert_int_eq(sl_plan_split_index(p, "alox20+cap-pmma"), 5);
    ck_assert_int_eq(sl_plan_split_index(p, "alox20+nothing"), -1);
    ck_assert_int_eq(sl_plan_wafer_index(p, "W10"), 9);
    ck_assert_int_eq(sl_plan_wafer_index(p, "W19"), -1);
    ck_assert_uint_eq(p->splits[3].n_treatments, 2);
    ck_assert_uint_eq(p->splits[3].levels[1], 1);
    ck_assert_uint_eq(p->splits[3].levels[2], 1);
    ck_assert_ptr_null(p->splits[3].wafers);
    sl_plan_free(p);
    free(path);
}
END_TEST

/* Doping sums of demo.yaml, by hand (cm^-2):
 *   ox90+anneal-350+cap-pmma: -2.0e12 + 0 + 1.2e12 + 0.4e12 = -0.4e12,
 *     sigma sqrt(0.8^2 + 0.2^2 + 0.3^2 + 0.2^2) e12 = sqrt(0.81) e12 = 0.9e12;
 *   alox20: -2.0e12 + 0.5e12 = -1.5e12, sigma sqrt(0.8^2 + 0.3^2) e12 = 0.854400e12. */
START_TEST(split_doping_by_hand)
{
    char *path = plan_file("demo.yaml");
    sl_plan *p = load_ok(path, NULL);
    sl_est a = sl_plan_split_doping_per_cm2(p, (size_t)sl_plan_split_index(p, "ox90+anneal-350+cap-pmma"));
    ck_assert_double_eq_tol(a.val, -0.4e12, 1e3);
    ck_assert_double_eq_tol(a.sigma, 0.9e12, 1e3);
    sl_est b = sl_plan_split_doping_per_cm2(p, (size_t)sl_plan_split_index(p, "alox20"));
    ck_assert_double_eq_tol(b.val, -1.5e12, 1e3);
    ck_assert_double_eq_tol(b.sigma, sqrt(0.73) * 1e12, 1e3);
    sl_plan_free(p);
    free(path);
}
END_TEST

START_TEST(stack_layers_in_si)
{
    char *path = plan_file("demo.yaml");
    sl_plan *p = load_ok(path, NULL);
    sl_layer layers[4];
    size_t n = 0;
    ck_assert_int_eq(sl_plan_stack(p, 1, layers, 4, &n), SL_OK);
    ck_assert_uint_eq(n, 2);
    /* Al2O3 9 and SiO2 3.9, 7 and 10 MV/cm: the built-in table of docs/physics.md */
    ck_assert_double_eq_tol(layers[0].relative_permittivity, 9.0, 1e-12);
    ck_assert_double_eq_tol(layers[0].thickness_m, 20e-9, 1e-18);
    ck_assert_double_eq_tol(layers[0].thickness_sigma_m, 1e-9, 1e-18);
    ck_assert_double_eq_tol(layers[0].breakdown_V_per_m, 7e8, 1.0);
    ck_assert_double_eq_tol(layers[1].relative_permittivity, 3.9, 1e-12);
    ck_assert_int_eq(sl_plan_stack(p, 1, layers, 1, &n), SL_EINPUT); /* too small a buffer */
    ck_assert_int_eq(sl_plan_stack(p, 7, layers, 4, &n), SL_EINPUT); /* no such dielectric */
    ck_assert_double_eq(p->dielectrics[0].gate_range_V[0], -40.0);
    ck_assert_int_eq(p->dielectrics[0].has_gate_range, 1);
    sl_plan_free(p);
    free(path);
}
END_TEST

START_TEST(explicit_design_normalised)
{
    char *path = plan_file("hall-hbn-lowtemp.yaml");
    sl_plan *p = load_ok(path, NULL);
    ck_assert_int_eq(p->design_kind, SL_DESIGN_EXPLICIT);
    ck_assert_int_eq(p->wafers_per_split, 0);
    ck_assert_uint_eq(p->n_splits, 4);
    ck_assert_uint_eq(p->n_wafers, 7);
    ck_assert_str_eq(p->wafers[6], "H07");
    /* factor 0: dielectrics in order of use; one two-level factor per treatment */
    ck_assert_uint_eq(p->n_factors, 2);
    ck_assert_uint_eq(p->factors[0].n_levels, 2);
    ck_assert_str_eq(p->factors[0].levels[1], "hbn20-graphite");
    ck_assert_int_eq(p->factors[0].level_ref[1], 1);
    ck_assert_str_eq(p->factors[1].name, "vacuum-anneal-300");
    ck_assert_str_eq(p->factors[1].levels[0], "none");
    ck_assert_int_eq(p->factors[1].level_ref[0], -1);
    ck_assert_int_eq(p->factors[1].level_ref[1], 0);
    const sl_plan_split *s = &p->splits[3];
    ck_assert_str_eq(s->name, "graphite-annealed");
    ck_assert_uint_eq(s->dielectric, 1);
    ck_assert_uint_eq(s->levels[0], 1);
    ck_assert_uint_eq(s->levels[1], 1);
    ck_assert_uint_eq(p->splits[0].levels[1], 0);
    ck_assert_uint_eq(s->n_wafers, 1);
    ck_assert_str_eq(s->wafers[0], "H06");
    /* the plan's own material is merged with the built-ins */
    const sl_plan_material *m = sl_plan_material_find(p, "hBN-exfoliated");
    ck_assert_ptr_nonnull(m);
    ck_assert_double_eq(m->relative_permittivity, 3.4);
    ck_assert_ptr_nonnull(sl_plan_material_find(p, "ZrO2"));
    ck_assert_ptr_null(sl_plan_material_find(p, "unobtainium"));
    sl_plan_free(p);
    free(path);
}
END_TEST

static const char small_plan[] =
    "lot: T-1\n"
    "temperatures_K: [300]\n"
    "materials: [ { name: SiO2, relative_permittivity: 4.2, breakdown_MV_per_cm: 9 } ]\n"
    "dielectrics:\n"
    "  - { name: a, layers: &stack [ { material: SiO2, thickness_nm: 50 } ] }\n"
    "  - { name: b, layers: *stack, doping_per_cm2: { mean: 1e12 } }\n"
    "treatments: [ { name: t1, doping_per_cm2: { mean: 2e11, sigma: 1e11 } } ]\n"
    "design:\n"
    "  kind: full-factorial\n"
    "  factors: { step: [t1, none], dielectric: [b, a] }\n"
    "  wafers_per_split: 1\n"
    "wafers: [X9, X1, X5, X7]\n"
    "devices_per_wafer: 4\n";

START_TEST(defaults_overrides_and_order)
{
    sl_plan *p = parse_ok(small_plan);
    /* built-in SiO2 overridden by the plan, no duplicate entry */
    const sl_plan_material *m = sl_plan_material_find(p, "SiO2");
    ck_assert_double_eq(m->relative_permittivity, 4.2);
    ck_assert_double_eq(m->breakdown_MV_per_cm, 9.0);
    size_t sio2 = 0;
    for (size_t i = 0; i < p->n_materials; i++)
        sio2 += strcmp(p->materials[i].name, "SiO2") == 0;
    ck_assert_uint_eq(sio2, 1);
    /* the alias shares the first dielectric's layers */
    ck_assert_uint_eq(p->dielectrics[1].n_layers, 1);
    ck_assert_double_eq(p->dielectrics[1].layers[0].thickness_nm, 50.0);
    /* defaults */
    ck_assert_double_eq(p->fermi_velocity_m_s, 1.0e6);
    ck_assert_double_eq(p->expected_yield, 1.0);
    ck_assert_double_eq(p->baseline_doping_per_cm2.val, 0.0);
    ck_assert_str_eq(p->title, "");
    ck_assert_int_eq(p->resolve.present, 0);
    ck_assert_int_eq(p->wafer_rows, 2); /* smallest square map holding 4 devices */
    /* dielectric becomes factor 0 wherever it was written; 'none' is level 0 */
    ck_assert_str_eq(p->factors[0].name, "dielectric");
    ck_assert_str_eq(p->factors[0].levels[0], "b");
    ck_assert_str_eq(p->factors[1].name, "step");
    ck_assert_str_eq(p->factors[1].levels[0], "none");
    ck_assert_str_eq(p->factors[1].levels[1], "t1");
    ck_assert_str_eq(p->splits[0].name, "b");
    ck_assert_str_eq(p->splits[1].name, "b+t1");
    ck_assert_str_eq(p->wafers[1], "X1");
    /* b+t1: 0 + 1e12 + 2e11 = 1.2e12, sigma 1e11 (the only one given) */
    sl_est d = sl_plan_split_doping_per_cm2(p, 1);
    ck_assert_double_eq_tol(d.val, 1.2e12, 1.0);
    ck_assert_double_eq_tol(d.sigma, 1e11, 1.0);
    sl_plan_free(p);
}
END_TEST


/* `tolerance` of a doping block, else its sigma; 'none' has none; the
 * baseline takes no tolerance (it is not a level). */
START_TEST(level_tolerance_defaults_to_sigma)
{
    static const char text[] =
        "lot: T-2\n"
        "temperatures_K: [300]\n"
        "dielectrics:\n"
        "  - { name: a, layers: [ { material: SiO2, thickness_nm: 50 } ],\n"
        "      doping_per_cm2: { mean: 0, sigma: 2e11, tolerance: 3e11 } }\n"
        "treatments: [ { name: t1, doping_per_cm2: { mean: 2e11, sigma: 1e11 } } ]\n"
        "design: { kind: full-factorial, factors: { dielectric: [a], step: [none, t1] },\n"
        "          wafers_per_split: 1 }\n"
        "wafers: 2\n"
        "devices_per_wafer: 4\n";
    sl_plan *p = parse_ok(text);
    ck_assert_double_eq(sl_plan_level_tolerance_per_cm2(p, 0, 0), 3e11);
    ck_assert_double_eq(sl_plan_level_tolerance_per_cm2(p, 1, 1), 1e11);
    ck_assert_double_eq(sl_plan_level_tolerance_per_cm2(p, 1, 0), 0.0);
    sl_plan_free(p);
    static const char baseline[] =
        "lot: T-3\n"
        "temperatures_K: [300]\n"
        "baseline_doping_per_cm2: { mean: 0, tolerance: 1e11 }\n"
        "dielectrics: [ { name: a, layers: [ { material: SiO2, thickness_nm: 50 } ] } ]\n"
        "design: { kind: full-factorial, factors: { dielectric: [a] }, wafers_per_split: 1 }\n"
        "wafers: 1\n"
        "devices_per_wafer: 4\n";
    sl_diag *diag = sl_diag_new();
    sl_plan *q = NULL;
    ck_assert_int_eq(sl_plan_parse(&q, baseline, strlen(baseline), "b.yaml", diag), SL_EINPUT);
    ck_assert_ptr_null(q);
    ck_assert_int_eq(sl_diag_get(diag, 0)->line, 3);
    ck_assert_ptr_nonnull(strstr(sl_diag_get(diag, 0)->text, "unknown key 'tolerance'"));
    sl_diag_free(diag);
}
END_TEST

/* A dielectric's expected mobility: read when given; a negative mean, a
 * missing sigma and an unknown key are located errors. */
static void mobility_error(const char *block, int col, const char *message)
{
    char text[1024];
    snprintf(text, sizeof text,
             "lot: T-4\n"
             "temperatures_K: [300]\n"
             "dielectrics:\n"
             "  - { name: a, layers: [ { material: SiO2, thickness_nm: 50 } ],\n"
             "      mobility_cm2_per_Vs: %s }\n"
             "design: { kind: full-factorial, factors: { dielectric: [a] }, wafers_per_split: 1 }\n"
             "wafers: 1\n"
             "devices_per_wafer: 4\n",
             block);
    sl_diag *diag = sl_diag_new();
    sl_plan *q = NULL;
    ck_assert_int_eq(sl_plan_parse(&q, text, strlen(text), "m.yaml", diag), SL_EINPUT);
    ck_assert_ptr_null(q);
    ck_assert_int_eq(sl_diag_get(diag, 0)->line, 5);
    ck_assert_int_eq(sl_diag_get(diag, 0)->col, col);
    ck_assert_msg(strstr(sl_diag_get(diag, 0)->text, message), "%s", sl_diag_get(diag, 0)->text);
    sl_diag_free(diag);
}

START_TEST(dielectric_mobility_expectation)
{
    static const char text[] =
        "lot: T-4\n"
        "temperatures_K: [300]\n"
        "dielectrics:\n"
        "  - { name: a, layers: [ { material: SiO2, thickness_nm: 50 } ],\n"
        "      mobility_cm2_per_Vs: { mean: 3000, sigma: 400 } }\n"
        "  - { name: b, layers: [ { material: SiO2, thickness_nm: 90 } ] }\n"
        "design: { kind: full-factorial, factors: { dielectric: [a, b] }, wafers_per_split: 1 }\n"
        "wafers: 2\n"
        "devices_per_wafer: 4\n";
    sl_plan *p = parse_ok(text);
    ck_assert_int_eq(p->dielectrics[0].has_mobility, 1);
    ck_assert_double_eq(p->dielectrics[0].mobility_cm2_per_Vs.val, 3000.0);
    ck_assert_double_eq(p->dielectrics[0].mobility_cm2_per_Vs.sigma, 400.0);
    ck_assert_int_eq(p->dielectrics[1].has_mobility, 0);
    sl_plan_free(p);
    /* columns: "      mobility_cm2_per_Vs: " is 27 characters */
    mobility_error("{ mean: -5, sigma: 1 }", 36, "mean");
    mobility_error("{ mean: 3000 }", 28, "missing required key 'sigma'");
    mobility_error("{ mean: 3000, sigma: 1, sigm: 2 }", 52, "unknown key 'sigm'");
}
END_TEST

START_TEST(hash_is_fnv1a)
{
    char text[] = "a";
    sl_plan p = { .text = text, .text_len = 1 };
    char hex[17];
    sl_plan_hash_hex(&p, hex);
    /* FNV-1a 64 of "a": test vector of the FNV reference code (Noll), also
     * computed with a python3 loop (offset 0xcbf29ce484222325, prime 0x100000001b3) */
    ck_assert_str_eq(hex, "af63dc4c8601ec8c");
    sl_plan *q = parse_ok(small_plan);
    char h1[17];
    sl_plan_hash_hex(q, h1);
    ck_assert_uint_eq(strlen(h1), 16);
    ck_assert_uint_eq(q->text_len, strlen(small_plan));
    ck_assert_int_eq(memcmp(q->text, small_plan, q->text_len), 0);
    sl_plan_free(q);
}
END_TEST

/* ---- the broken-plan corpus: file, line, col, a piece of the message ---- */

typedef struct {
    const char *file;
    long line, col;
    const char *fragment;
} located_case;

/* Path of a corpus file under tests/data/plans/<dir>. */
static char *corpus_path(const char *dir, const char *file)
{
    char *name = sl_test_path(dir, file);
    char *path = sl_test_data(name);
    free(name);
    return path;
}

static const located_case bad_cases[] = {
    { "syntax.yaml", 6, 1, "yaml syntax: did not find expected ',' or ']'" },
    { "unknown_key.yaml", 2, 1, "unknown key 'temperature_K' in the plan (did you mean 'temperatures_K'?)" },
    { "wrong_type.yaml", 5, 47, "'thickness_nm' must be a number, got 'thick'" },
    { "wrong_type_list.yaml", 2, 17, "'temperatures_K' must be a list, not a single value" },
    { "missing_key.yaml", 1, 1, "missing required key 'lot'" },
    { "unknown_material.yaml", 5, 27, "unknown material 'SiO3' (did you mean 'SiO2'?)" },
    { "unknown_dielectric.yaml", 11, 18, "unknown dielectric 'ox9' (did you mean 'ox90'?)" },
    { "unknown_treatment.yaml", 12, 20, "unknown treatment 'anneal-35' (did you mean 'anneal-350'?)" },
    { "unknown_design_kind.yaml", 9, 9, "unknown design kind 'full-factoral' (did you mean 'full-factorial'?)" },
    { "duplicate_name.yaml", 6, 11, "duplicate dielectric name 'ox90'" },
    { "duplicate_key.yaml", 15, 1, "duplicate key 'wafers'" },
    { "nonpositive_thickness.yaml", 5, 47, "'thickness_nm' must be > 0, got '0'" },
    { "negative_sigma.yaml", 7, 64, "'sigma' must be >= 0, got '-0.3e12'" },
    { "negative_tolerance.yaml", 7, 83, "'tolerance' must be >= 0, got '-1e11'" },
    { "negative_temperature.yaml", 2, 23, "'temperatures_K' must be >= 0, got '-4'" },
    { "yield_range.yaml", 15, 17, "'expected_yield' must be in (0, 1], got '1.2'" },
    { "too_few_wafers.yaml", 14, 9, "3 wafers are fewer than 2 splits x 2 wafers_per_split = 4" },
    { "gate_range_no_zero.yaml", 6, 19, "gate_range_V [5, 40] does not contain 0 V" },
    { "seed_range.yaml", 16, 7, "'seed' must be a whole number from 0 to 4294967295" },
    { "empty.yaml", 1, 1, "the plan is empty" },
    { "not_a_mapping.yaml", 1, 1, "the plan must be a mapping" },
    { "two_documents.yaml", 16, 1, "a plan is one YAML document" },
    { "explicit_wafers.yaml", 12, 74, "wafer 'A1' is already in split 'as-made'" },
    { "explicit_wafers.yaml", 12, 78, "unknown wafer 'A9'" },
    { "combined.yaml", 2, 23, "'temperatures_K' must be >= 0" },
    { "combined.yaml", 5, 27, "unknown material 'SiO3'" },
    { "combined.yaml", 12, 20, "unknown treatment 'anneal-35'" },
    { "combined.yaml", 15, 20, "'devices_per_wafer' must be a whole number" },
    /* hostile YAML */
    { "alias_bomb.yaml", 8, 8, "alias '*e' expands the plan beyond 200000 nodes" },
    { "deep_nesting.yaml", 2, 39, "the plan nests deeper than 32 levels" },
    { "self_alias.yaml", 4, 13, "alias '*loop' refers to a node that contains it" },
};

static int has_message(const sl_diag *diag, const located_case *c)
{
    for (size_t i = 0; i < sl_diag_size(diag); i++) {
        const sl_diag_msg *m = sl_diag_get(diag, i);
        if (m->severity == SL_SEV_ERROR && m->line == c->line && m->col == c->col &&
            strstr(m->text, c->fragment))
            return 1;
    }
    return 0;
}

static void dump(const sl_diag *diag)
{
    char line[1200];
    for (size_t i = 0; i < sl_diag_size(diag); i++) {
        sl_diag_format(sl_diag_get(diag, i), line, sizeof line);
        fprintf(stderr, "  got: %s\n", line);
    }
}

START_TEST(bad_plan_reports_location)
{
    const located_case *c = &bad_cases[_i];
    char *path = corpus_path("plans/bad", c->file);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = (sl_plan *)1;
    sl_status st = sl_plan_load(&plan, path, diag);
    ck_assert_int_eq(st, SL_EINPUT);
    ck_assert_ptr_null(plan);
    if (!has_message(diag, c))
        dump(diag);
    ck_assert_msg(has_message(diag, c), "%s: no error at %ld:%ld with '%s'", c->file, c->line,
                  c->col, c->fragment);
    /* every message carries the file name */
    ck_assert_str_eq(sl_diag_get(diag, 0)->file, path);
    sl_diag_free(diag);
    free(path);
}
END_TEST

static size_t errors_in(const char *bad_file)
{
    char *path = corpus_path("plans/bad", bad_file);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_plan_load(&plan, path, diag);
    size_t n = sl_diag_count(diag, SL_SEV_ERROR);
    sl_diag_free(diag);
    free(path);
    return n;
}

START_TEST(every_problem_reported_once)
{
    ck_assert_uint_eq(errors_in("combined.yaml"), 4); /* all four, not just the first */
    /* a typo'd key is not also reported as a missing one */
    ck_assert_uint_eq(errors_in("unknown_key.yaml"), 1);
    /* hostile input gets one located line */
    ck_assert_uint_eq(errors_in("self_alias.yaml"), 1);
    ck_assert_uint_eq(errors_in("alias_bomb.yaml"), 1);
    ck_assert_uint_eq(errors_in("deep_nesting.yaml"), 1);
}
END_TEST

START_TEST(oversized_plan_refused)
{
    char *dir = sl_test_tmpdir();
    char *path = sl_test_path(dir, "huge.yaml");
    size_t size = ((size_t)1 << 20) + 100;
    char *text = malloc(size + 1);
    memset(text, '#', size); /* one long comment: valid YAML, just too big */
    text[size] = '\0';
    ck_assert_int_eq(sl_test_write_file(path, text), 0);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_load(&plan, path, diag), SL_EINPUT);
    ck_assert_ptr_null(plan);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 1);
    ck_assert_ptr_nonnull(strstr(sl_diag_last(diag), "larger than the 1 MiB"));
    sl_diag_clear(diag);
    ck_assert_int_eq(sl_plan_parse(&plan, text, size, "mem", diag), SL_EINPUT);
    sl_diag_free(diag);
    free(text);
    sl_test_rmtree(dir);
    free(path);
    free(dir);
}
END_TEST

/* Under the size cap but with 300000 list items: the node cap still holds. */
START_TEST(too_many_nodes_refused)
{
    size_t items = 300000;
    char *text = malloc(2 * items + 32);
    size_t len = (size_t)sprintf(text, "lot: [");
    for (size_t i = 0; i < items; i++)
        len += (size_t)sprintf(text + len, "%s", i ? ",x" : "x");
    len += (size_t)sprintf(text + len, "]\n");
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_parse(&plan, text, len, "many.yaml", diag), SL_EINPUT);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 1);
    ck_assert_ptr_nonnull(strstr(sl_diag_last(diag), "more than 200000 nodes"));
    sl_diag_free(diag);
    free(text);
}
END_TEST

START_TEST(missing_file_is_io_error)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    char *path = sl_test_data("plans/no-such-plan.yaml");
    ck_assert_int_eq(sl_plan_load(&plan, path, diag), SL_EIO);
    ck_assert_ptr_null(plan);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 1);
    sl_diag_free(diag);
    free(path);
}
END_TEST

/* ---- warnings: the plan is usable, the message located ---- */

static const located_case warn_cases[] = {
    /* N = 4.0e13 cm^-2 on 90 nm SiO2: V = -e N / C_g = -167 V, far beyond the
     * +/-45 V safe range (0.5 x 10 MV/cm x 90 nm) */
    { "cnp_outside.yaml", 11, 18, "split 'ox90+anneal-350': predicted neutrality point" },
    /* n_th(300 K) e / C_g for 90 nm SiO2 is about 0.34 V, above shift_V 0.1 */
    { "shift_below_floor.yaml", 16, 21, "shift_V 0.1 V is below the thermal floor of 'ox90'" },
    /* alox20 gives no doping block: sigma 0, tolerance 0 (plan.h:
     * sl_plan_level_tolerance_per_cm2), so no interval can lie inside it */
    { "zero_tolerance.yaml", 6, 5, "dielectric 'alox20' has doping sigma 0 and no tolerance" },
};

START_TEST(warning_plans_load)
{
    const located_case *c = &warn_cases[_i];
    char *path = corpus_path("plans/warn", c->file);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_load(&plan, path, diag), SL_OK);
    ck_assert_ptr_nonnull(plan);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 0);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_WARNING), 1);
    const sl_diag_msg *m = sl_diag_get(diag, 0);
    ck_assert_int_eq(m->line, c->line);
    ck_assert_int_eq(m->col, c->col);
    ck_assert_ptr_nonnull(strstr(m->text, c->fragment));
    sl_plan_free(plan);
    sl_diag_free(diag);
    free(path);
}
END_TEST

/* The thermal-floor warning's figure: n_th = (pi/6)(k_B T / hbar v_F)^2 at
 * 300 K is 8.077e14 m^-2 (Fang et al. 2007, "about 8e10 cm^-2"); C_g of 90 nm
 * SiO2 = 3.9 eps0 / 90 nm = 3.8368e-4 F/m^2; e n_th / C_g = 0.3373 V, computed
 * with python3 from scipy.constants (k, hbar, e). */
START_TEST(thermal_floor_figure)
{
    char *path = sl_test_data("plans/warn/shift_below_floor.yaml");
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_load(&plan, path, diag), SL_OK);
    const char *text = sl_diag_get(diag, 0)->text;
    ck_assert_ptr_nonnull(strstr(text, "0.337 V"));
    sl_plan_free(plan);
    sl_diag_free(diag);
    free(path);
}
END_TEST

/* ---- second-wave keys: variation, batches, resolve shift, processed,
 * fractional designs ---- */

/* A plan whose line 7 is the design and line 10 the key under test. */
static const char key_base[] =
    "lot: K-1\n"
    "temperatures_K: [300]\n"
    "dielectrics: [ { name: ox, layers: [ { material: SiO2, thickness_nm: 90 } ] },\n"
    "               { name: ox2, layers: [ { material: SiO2, thickness_nm: 60 } ], "
    "doping_per_cm2: { mean: 0, sigma: 1e11 } } ]\n"
    "treatments: [ { name: anneal, doping_per_cm2: { mean: 1e12, sigma: 3e11 } },\n"
    "              { name: cap, doping_per_cm2: { mean: 1e11, sigma: 1e11 } } ]\n"
    "%s\n"
    "wafers: 8\n"
    "devices_per_wafer: 10\n"
    "%s\n";

static const char full_design[] =
    "design: { kind: full-factorial, factors: { dielectric: [ox, ox2], anneal: [none, anneal] }, "
    "wafers_per_split: 2 }";

typedef struct {
    const char *design;   /* NULL: full_design */
    const char *line9;
    const char *token;    /* where the message points: first occurrence on its line */
    const char *fragment;
} key_case;

static const key_case key_cases[] = {
    { NULL, "variation: { wafer_sigma_per_cm2: 1e11, device_sigma: 0.5 }", "device_sigma:",
      "unknown key 'device_sigma' in variation (did you mean 'device_sigma_V'?)" },
    { NULL, "variation: { wafer_sigma_per_cm2: -1, device_sigma_V: 0.5 }", "-1",
      "'wafer_sigma_per_cm2' must be >= 0, got '-1'" },
    { NULL, "variaton: { wafer_sigma_per_cm2: 1e11, device_sigma_V: 0.5 }", "variaton",
      "unknown key 'variaton' in the plan (did you mean 'variation'?)" },
    { NULL, "batches: [ { step: aneal, capacity: 6 } ]", "aneal",
      "unknown step (a treatment or dielectric) 'aneal' (did you mean 'anneal'?)" },
    { NULL, "batches: [ { step: anneal, capacity: 0 } ]", "0 }",
      "'capacity' must be a whole number from 1 to 9999, got '0'" },
    { NULL, "batches: [ { step: anneal, capacity: 6 }, { step: anneal, capacity: 3 } ]",
      "anneal, capacity: 3", "step 'anneal' is batched twice" },
    { NULL, "resolve: { shift_per_cm2: 3e11, shift_V: 0.5 }", "0.5",
      "give 'shift_per_cm2' or 'shift_V' in resolve, not both" },
    { NULL, "resolve: { shift_per_cm: 3e11 }", "shift_per_cm:",
      "unknown key 'shift_per_cm' in resolve (did you mean 'shift_per_cm2'?)" },
    { NULL, "processed: 2026-02-30", "2026", "'processed' must be a date YYYY-MM-DD" },
    { "design: { kind: fractional-factorial, factors: { dielectric: [ox, ox2], anneal: [none, "
      "anneal], cap: [none, cap] }, wafers_per_split: 1, generators: { cap: [dielectric, aneal] } }",
      "seed: 1", "aneal]", "unknown factor 'aneal' (did you mean 'anneal'?)" },
    { "design: { kind: full-factorial, factors: { dielectric: [ox, ox2] }, wafers_per_split: 1, "
      "generators: { cap: [dielectric] } }",
      "seed: 1", "{ cap", "'generators' belongs to a fractional-factorial design" },
    { "design: { kind: fractional-factorial, factors: { dielectric: [ox, ox2] }, "
      "wafers_per_split: 1 }",
      "seed: 1", "{ kind", "a fractional-factorial design needs 'generators'" },
    { "design: { kind: fractional-factorail, factors: { dielectric: [ox, ox2] }, "
      "wafers_per_split: 1 }",
      "seed: 1", "fractional-factorail",
      "unknown design kind 'fractional-factorail' (did you mean 'fractional-factorial'?)" },
};

static char *key_plan(const key_case *c)
{
    size_t n = sizeof key_base + strlen(c->design ? c->design : full_design) + strlen(c->line9);
    char *text = malloc(n);
    snprintf(text, n, key_base, c->design ? c->design : full_design, c->line9);
    return text;
}

START_TEST(new_keys_located_errors)
{
    const key_case *c = &key_cases[_i];
    char *text = key_plan(c);
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    ck_assert_int_eq(sl_plan_parse(&plan, text, strlen(text), "k.yaml", diag), SL_EINPUT);
    const char *line = c->design ? strstr(text, "design:") : strstr(text, c->line9);
    long line_no = c->design ? 7 : 10;
    long col = (long)(strstr(line, c->token) - line) + 1;
    int found = 0;
    for (size_t i = 0; i < sl_diag_size(diag); i++) {
        const sl_diag_msg *m = sl_diag_get(diag, i);
        found |= m->severity == SL_SEV_ERROR && m->line == line_no && m->col == col &&
                 strstr(m->text, c->fragment) != NULL;
    }
    ck_assert_msg(found, "case %d: no error '%s' at %ld:%ld; last: %s", _i, c->fragment, line_no,
                  col, sl_diag_last(diag));
    sl_diag_free(diag);
    free(text);
}
END_TEST

START_TEST(new_keys_read)
{
    key_case c = { NULL, "variation: { wafer_sigma_per_cm2: 1e11, device_sigma_V: 0.5, "
                         "batch_sigma_per_cm2: 2e11 }\nbatches: [ { step: anneal, capacity: 3 } ]\n"
                         "resolve: { shift_V: 0.4 }\nprocessed: 2024-02-29", NULL, NULL };
    char *text = key_plan(&c);
    sl_diag *diag = sl_diag_new();
    sl_plan *p = NULL;
    ck_assert_int_eq(sl_plan_parse(&p, text, strlen(text), "k.yaml", diag), SL_OK);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    ck_assert_double_eq(p->variation.batch_sigma_per_cm2, 2e11);
    ck_assert_uint_eq(p->n_batches, 1);
    ck_assert_int_eq(p->batches[0].capacity, 3);
    ck_assert_int_eq(p->batches[0].is_dielectric, 0);
    ck_assert_ptr_eq(sl_plan_batch_of(p, 0, p->batches[0].ref), &p->batches[0]);
    ck_assert_double_eq(p->resolve.shift_V, 0.4);
    ck_assert_double_eq(p->resolve.alpha, 0.05);
    ck_assert_str_eq(p->processed, "2024-02-29"); /* a leap day */
    sl_plan_free(p);
    free(text);
    /* no variation block: one warning, at the top of the plan */
    c.line9 = "seed: 3";
    text = key_plan(&c);
    sl_diag_clear(diag);
    ck_assert_int_eq(sl_plan_parse(&p, text, strlen(text), "k.yaml", diag), SL_OK);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_WARNING), 1);
    ck_assert_int_eq(sl_diag_get(diag, 0)->line, 1);
    ck_assert_ptr_nonnull(strstr(sl_diag_get(diag, 0)->text, "no 'variation' block"));
    sl_plan_free(p);
    free(text);
    /* a load scatter without batches, and batches without a load scatter */
    static const char *const lines[][2] = {
        { "variation: { wafer_sigma_per_cm2: 1e11, device_sigma_V: 0.5, batch_sigma_per_cm2: 1e11 }",
          "batch_sigma_per_cm2 is not used: the plan has no batches" },
        { "variation: { wafer_sigma_per_cm2: 1e11, device_sigma_V: 0.5 }\n"
          "batches: [ { step: ox2, capacity: 4 } ]",
          "batches without variation.batch_sigma_per_cm2" },
        { "variation: { wafer_sigma_per_cm2: 0, device_sigma_V: 0 }",
          "a wafer mean would have no scatter" },
    };
    for (size_t i = 0; i < 3; i++) {
        c.line9 = lines[i][0];
        text = key_plan(&c);
        sl_diag_clear(diag);
        ck_assert_int_eq(sl_plan_parse(&p, text, strlen(text), "k.yaml", diag), SL_OK);
        ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_WARNING), 1);
        ck_assert_int_eq(sl_diag_get(diag, 0)->line, 10);
        ck_assert_ptr_nonnull(strstr(sl_diag_get(diag, 0)->text, lines[i][1]));
        if (i == 1)
            ck_assert_int_eq(p->batches[0].is_dielectric, 1);
        sl_plan_free(p);
        free(text);
    }
    text = NULL;
    sl_diag_free(diag);
    free(text);
}
END_TEST


/* ---- the command ---- */

static sl_run_result run_check(const char *path)
{
    const char *argv[] = { "check", path, NULL };
    return sl_test_run(NULL, NULL, argv);
}

START_TEST(check_command_exit_codes)
{
    char *good = plan_file("demo.yaml");
    sl_run_result r = run_check(good);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_ptr_nonnull(strstr(r.out, "lot DEMO-01, 8 splits, 18 wafers"));
    ck_assert_str_eq(r.err, "");
    sl_run_result_free(&r);

    char *bad = sl_test_data("plans/bad/combined.yaml");
    r = run_check(bad);
    ck_assert_int_eq(r.exit_code, 2);
    ck_assert_str_eq(r.out, "");
    char expect[1200];
    snprintf(expect, sizeof expect, "%s:5:27: error: unknown material 'SiO3'", bad);
    ck_assert_ptr_nonnull(strstr(r.err, expect));
    sl_run_result_free(&r);

    char *warn = sl_test_data("plans/warn/cnp_outside.yaml");
    r = run_check(warn);
    ck_assert_int_eq(r.exit_code, 0);
    snprintf(expect, sizeof expect, "%s:11:18: warning: ", warn);
    ck_assert_ptr_nonnull(strstr(r.err, expect));
    ck_assert_ptr_nonnull(strstr(r.out, "1 warning"));
    sl_run_result_free(&r);

    char *missing = sl_test_data("plans/no-such-plan.yaml");
    r = run_check(missing);
    ck_assert_int_eq(r.exit_code, 1);
    sl_run_result_free(&r);
    free(good);
    free(bad);
    free(warn);
    free(missing);
}
END_TEST

START_TEST(check_command_usage)
{
    const char *help[] = { "check", "--help", NULL };
    sl_run_result r = sl_test_run(NULL, NULL, help);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_ptr_nonnull(strstr(r.out, "usage: splitlot check PLAN"));
    sl_run_result_free(&r);
    const char *none[] = { "check", NULL };
    r = sl_test_run(NULL, NULL, none);
    ck_assert_int_eq(r.exit_code, 2);
    sl_run_result_free(&r);
    const char *bad_opt[] = { "check", "--frobnicate", "x.yaml", NULL };
    r = sl_test_run(NULL, NULL, bad_opt);
    ck_assert_int_eq(r.exit_code, 2);
    sl_run_result_free(&r);
}
END_TEST

static Suite *plan_suite(void)
{
    Suite *s = suite_create("plan");
    TCase *tc = tcase_create("parse");
    tcase_add_test(tc, example_plans_check_clean);
    tcase_add_test(tc, demo_plan_values);
    tcase_add_test(tc, split_doping_by_hand);
    tcase_add_test(tc, stack_layers_in_si);
    tcase_add_test(tc, explicit_design_normalised);
    tcase_add_test(tc, defaults_overrides_and_order);
    tcase_add_test(tc, level_tolerance_defaults_to_sigma);
    tcase_add_test(tc, dielectric_mobility_expectation);
    tcase_add_test(tc, hash_is_fnv1a);
    suite_add_tcase(s, tc);
    TCase *bad = tcase_create("broken");
    tcase_add_loop_test(bad, bad_plan_reports_location, 0,
                        (int)(sizeof bad_cases / sizeof bad_cases[0]));
    tcase_add_test(bad, every_problem_reported_once);
    tcase_add_test(bad, oversized_plan_refused);
    tcase_add_test(bad, too_many_nodes_refused);
    tcase_add_test(bad, missing_file_is_io_error);
    tcase_add_loop_test(bad, warning_plans_load, 0, (int)(sizeof warn_cases / sizeof warn_cases[0]));
    tcase_add_loop_test(bad, new_keys_located_errors, 0,
                        (int)(sizeof key_cases / sizeof key_cases[0]));
    tcase_add_test(bad, new_keys_read);
    tcase_add_test(bad, thermal_floor_figure);
    suite_add_tcase(s, bad);
    TCase *cli = tcase_create("cli");
    tcase_add_test(cli, check_command_exit_codes);
    tcase_add_test(cli, check_command_usage);
    suite_add_tcase(s, cli);
    return s;
}

int main(void)
{
    return sl_test_main(plan_suite());
}
