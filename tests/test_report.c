/* SPDX-License-Identifier: MIT
 * Tests of the lot report: two lots built by the binary in a scratch folder
 * (one from fitted sweeps, one from results with three devices moved far
 * off), their HTML checked against the analysis and compare's JSON: self-
 * contained, escaped, one die element per die, flag counts, verdicts,
 * per-split parameters against the plan, curves, history, determinism, the
 * atomic write and the command's errors.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "splitlot/analyze.h"
#include "splitlot/report.h"
#include "test_support.h"

/* The escaping probe put into the plans' title. */
#define HOSTILE_TITLE "Split <b>&\" lot"
#define HOSTILE_TITLE_ESCAPED "Split &lt;b&gt;&amp;&quot; lot"
#define FIXED_DATE "2026-01-02 03:04 UTC"
#define SHIFT_V 15.0    /* far outside any split's spread of about 0.6 V */
#define SWEEP_SHIFT_V 4.0 /* an outlier in its split, its neutrality point still swept */

static char *g_dir, *g_db;
static char *g_html[2];      /* report of DEMO-01 (sweeps) and DEMO-02 (results) */
static char *g_json[2];      /* compare --format json of both */
static const char *const g_lots[2] = { "DEMO-01", "DEMO-02" };

/* ---- building the lots ---------------------------------------------------- */

static void run_ok(const char *const *argv)
{
    sl_run_result r = sl_test_run(g_dir, NULL, argv);
    if (r.exit_code != 0)
        fprintf(stderr, "%s %s failed (%d): %s\n", argv[0], argv[1], r.exit_code, r.err);
    ck_assert_int_eq(r.exit_code, 0);
    sl_run_result_free(&r);
}

/* An edit of one line: write the replacement into out (cap bytes, with its
 * newline) and return 1; return 0 to keep the line, -1 to drop it. */
typedef int (*line_edit)(char *out, size_t cap, const char *line, size_t row, void *ctx);

/* Copy a text file line by line through edit; returns the lines edited. */
static size_t edit_lines(const char *from_path, const char *to_path, line_edit edit, void *ctx)
{
    char *text = sl_test_read_file(from_path, NULL);
    ck_assert_msg(text != NULL, "cannot read %s", from_path);
    size_t cap = strlen(text) * 2 + 4096, n = 0, edited = 0, row = 0;
    char *out = malloc(cap);
    for (char *line = strtok(text, "\n"); line; line = strtok(NULL, "\n"), row++) {
        int r = edit(out + n, cap - n, line, row, ctx);
        if (r == 0)
            n += (size_t)snprintf(out + n, cap - n, "%s\n", line);
        else if (r > 0) {
            n += strlen(out + n);
            edited++;
        }
    }
    out[n] = '\0';
    ck_assert_int_eq(sl_test_write_file(to_path, out), 0);
    free(out);
    free(text);
    return edited;
}

/* The same inside the scratch folder. */
static size_t edit_scratch(const char *from_name, const char *to_name, line_edit edit, void *ctx)
{
    char *from = sl_test_path(g_dir, from_name), *to = sl_test_path(g_dir, to_name);
    size_t edited = edit_lines(from, to, edit, ctx);
    free(to);
    free(from);
    return edited;
}

static int plan_line(char *out, size_t cap, const char *line, size_t row, void *lot)
{
    (void)row;
    if (strncmp(line, "title:", 6) == 0)
        return snprintf(out, cap, "title: '%s'\n", HOSTILE_TITLE) > 0;
    if (strncmp(line, "lot:", 4) == 0)
        return snprintf(out, cap, "lot: %s\n", (const char *)lot) > 0;
    return 0;
}

/* The demo plan with the hostile title and the given lot name. */
static void write_plan(const char *name, const char *lot)
{
    char *demo = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *path = sl_test_path(g_dir, name);
    ck_assert_uint_eq(edit_lines(demo, path, plan_line, (void *)lot), 2);
    free(path);
    free(demo);
}

/* Three measured devices spread over the lot, SHIFT_V up; rows without a
 * value (unmeasured) do not count, nor devices of an alox20 split, whose
 * gate range ([-8, 8] V, plans/demo.yaml) the shift would leave: a value
 * beyond the range is stored as outside the sweep, not as a usable one. */
typedef struct {
    size_t next_row;
    int shifted;
    const char *truth;    /* the simulator's truth.csv, for each device's split */
} result_shift;

static int on_alox20(const char *truth, const char *wafer, const char *device)
{
    char key[80];
    snprintf(key, sizeof key, "\n%s,%s,", wafer, device);
    const char *at = strstr(truth, key);
    int x, y;
    char split[64];
    return at && sscanf(at + strlen(key), "%d,%d,%63[^,]", &x, &y, split) == 3 &&
           strncmp(split, "alox20", 6) == 0;
}

static int result_line(char *out, size_t cap, const char *line, size_t row, void *ctx)
{
    result_shift *rs = ctx;
    char wafer[32], device[32];
    int x, y, used = 0;
    double v;
    if (rs->shifted == 3 || row < rs->next_row
        || sscanf(line, "%31[^,],%31[^,],%d,%d,%lf%n", wafer, device, &x, &y, &v, &used) != 5
        || on_alox20(rs->truth, wafer, device))
        return 0;
    rs->next_row = row + 97;
    rs->shifted++;
    return snprintf(out, cap, "%s,%s,%d,%d,%.4f%s\n", wafer, device, x, y, v + SHIFT_V,
                    line + used) > 0;
}

static void shift_results(const char *name, const char *truth_name)
{
    char *path = sl_test_path(g_dir, truth_name);
    char *truth = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(truth);
    result_shift rs = { 97, 0, truth };
    ck_assert_uint_eq(edit_scratch(name, name, result_line, &rs), 3);
    free(truth);
    free(path);
}

/* "wafer,device," of the first good device of an alox20 split in truth.csv. */
static void pick_alox20_device(char *key, size_t size, const char *truth_name)
{
    char *path = sl_test_path(g_dir, truth_name);
    char *text = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(text);
    key[0] = '\0';
    for (char *line = strtok(text, "\n"); line && !key[0]; line = strtok(NULL, "\n")) {
        char wafer[32], device[32], split[64], kind[32];
        int x, y;
        if (sscanf(line, "%31[^,],%31[^,],%d,%d,%63[^,],%31[^,]", wafer, device, &x, &y, split,
                   kind) == 6 && strcmp(split, "alox20") == 0 && strcmp(kind, "good") == 0)
            snprintf(key, size, "%s,%s,", wafer, device);
    }
    ck_assert_msg(key[0] != '\0', "no good alox20 device in %s", truth_name);
    free(text);
    free(path);
}

static int sweep_line(char *out, size_t cap, const char *line, size_t row, void *key)
{
    size_t k = strlen(key);
    int x, y, used = 0;
    double vg;
    (void)row;
    if (strncmp(line, key, k) != 0 || sscanf(line + k, "%d,%d,%lf%n", &x, &y, &vg, &used) != 3)
        return 0;
    return snprintf(out, cap, "%s%d,%d,%.6f%s\n", (const char *)key, x, y, vg + SWEEP_SHIFT_V,
                    line + k + used) > 0;
}

/* Move one device's whole sweep SWEEP_SHIFT_V up the gate axis: a clean fit
 * whose neutrality point is an outlier of its split. */
static void shift_sweep(const char *sweeps_name, const char *truth_name)
{
    char key[80];
    pick_alox20_device(key, sizeof key, truth_name);
    ck_assert_uint_gt(edit_scratch(sweeps_name, sweeps_name, sweep_line, key), 8);
}

static int wafer_line(char *out, size_t cap, const char *line, size_t row, void *ctx)
{
    (void)out;
    (void)cap;
    (void)ctx;
    int keep = row == 0 || strncmp(line, "W01,", 4) == 0 || strncmp(line, "W02,", 4) == 0
               || strncmp(line, "W03,", 4) == 0;
    return keep ? 0 : -1;
}

/* Results of sim2 for three wafers only: fewer wafers than coefficients. */
static void three_wafer_results(const char *from_name, const char *to_name)
{
    ck_assert_uint_eq(edit_scratch(from_name, to_name, wafer_line, NULL), 0);
}

static char *report_and_compare(int k)
{
    char name[32];
    snprintf(name, sizeof name, "r%d.html", k + 1);
    const char *rep[] = { "report", "--lot", g_lots[k], "--out", name, "--db", "t.db", NULL };
    run_ok(rep);
    const char *cmp[] = { "compare", "--lot", g_lots[k], "--db", "t.db", "--format", "json", NULL };
    sl_run_result r = sl_test_run(g_dir, NULL, cmp);
    ck_assert_int_eq(r.exit_code, 0);
    g_json[k] = r.out;
    free(r.err);
    char *path = sl_test_path(g_dir, name);
    char *html = sl_test_read_file(path, NULL);
    free(path);
    return html;
}

/* DEMO-03: three wafers only, after the other two reports were written. */
static void build_small_lot(void)
{
    write_plan("lot3.yaml", "DEMO-03");
    three_wafer_results("sim2/results.csv", "small.csv");
    const char *steps[][10] = {
        { "predict", "lot3.yaml", "--db", "t.db", NULL },
        { "ingest", "--lot", "DEMO-03", "--results", "small.csv", "--db", "t.db", NULL },
        { "report", "--lot", "DEMO-03", "--out", "r3.html", "--db", "t.db", NULL },
    };
    for (size_t i = 0; i < sizeof steps / sizeof steps[0]; i++)
        run_ok(steps[i]);
}

static void build_lots(void)
{
    g_dir = sl_test_tmpdir();
    g_db = sl_test_path(g_dir, "t.db");
    write_plan("lot1.yaml", g_lots[0]);
    write_plan("lot2.yaml", g_lots[1]);
    const char *steps[][12] = {
        { "predict", "lot1.yaml", "--db", "t.db", NULL },
        { "simulate", "lot1.yaml", "--out", "sim1", "--seed", "7", "--true-doping",
          "anneal-350=0.3e12", NULL },
        { "predict", "lot2.yaml", "--db", "t.db", NULL },
        { "simulate", "lot2.yaml", "--out", "sim2", "--seed", "8", "--no-sweeps",
          "--true-doping", "anneal-350=0.3e12", NULL },
    };
    for (size_t i = 0; i < sizeof steps / sizeof steps[0]; i++)
        run_ok(steps[i]);
    shift_sweep("sim1/sweeps.csv", "sim1/truth.csv");
    shift_results("sim2/results.csv", "sim2/truth.csv");
    const char *ingest[][12] = {
        { "ingest", "--lot", "DEMO-01", "--sweeps", "sim1/sweeps.csv", "--db", "t.db", NULL },
        { "ingest", "--lot", "DEMO-02", "--results", "sim2/results.csv", "--db", "t.db", NULL },
    };
    for (size_t i = 0; i < sizeof ingest / sizeof ingest[0]; i++)
        run_ok(ingest[i]);
    for (int k = 0; k < 2; k++)
        g_html[k] = report_and_compare(k);
    build_small_lot();
}

static void remove_lots(void)
{
    for (int k = 0; k < 2; k++) {
        free(g_html[k]);
        free(g_json[k]);
    }
    sl_test_rmtree(g_dir);
    free(g_dir);
    free(g_db);
}

/* ---- helpers ---------------------------------------------------------------- */

static size_t count_in(const char *from, const char *to, const char *needle)
{
    size_t n = 0, len = strlen(needle);
    for (const char *p = strstr(from, needle); p && (!to || p < to); p = strstr(p + len, needle))
        n++;
    return n;
}

static size_t count(const char *text, const char *needle) { return count_in(text, NULL, needle); }

/* Die elements: class "die", or "die" with more classes ("die flagged");
 * the map's group of dies is class "dies" and does not count. */
static size_t count_dies(const char *from, const char *to)
{
    return count_in(from, to, "class=\"die\"") + count_in(from, to, "class=\"die ");
}

/* The text of <section id="id"> (start and end pointers into html). */
static const char *section(const char *html, const char *id, const char **end)
{
    char open[64];
    snprintf(open, sizeof open, "<section id=\"%s\">", id);
    const char *start = strstr(html, open);
    *end = start ? strstr(start, "</section>") : NULL;
    return start;
}

/* A top-level number of compare's JSON, e.g. "flagged": 15. */
static long json_number(const char *json, const char *key)
{
    char pattern[64];
    snprintf(pattern, sizeof pattern, "\"%s\": ", key);
    const char *p = strstr(json, pattern);
    ck_assert_msg(p != NULL, "no %s in compare's JSON", key);
    return strtol(p + strlen(pattern), NULL, 10);
}

static sl_analysis *analyse(int k, sl_store **store)
{
    sl_diag *diag = sl_diag_new();
    sl_analysis *a = NULL;
    ck_assert_int_eq(sl_test_store_open(store, g_db, diag), SL_OK);
    ck_assert_int_eq(sl_analyze_lot(&a, *store, g_lots[k], diag), SL_OK);
    sl_diag_free(diag);
    return a;
}

typedef struct {
    size_t usable_flagged, usable_plain, unusable;
} device_counts;

static device_counts count_devices(const sl_analysis *a)
{
    device_counts c = { 0, 0, 0 };
    for (size_t i = 0; i < a->n_devices; i++) {
        int usable = isfinite(a->devices[i].cnp_measured_V);
        if (!usable)
            c.unusable++;
        else if (a->devices[i].flags)
            c.usable_flagged++;
        else
            c.usable_plain++;
    }
    return c;
}

/* A report's section next to the lot's analysis. */
typedef struct {
    sl_store *store;
    sl_analysis *a;
    device_counts counts;
    const char *sec, *end;
} lot_view;

static lot_view view_open(int k, const char *section_id)
{
    lot_view v;
    v.a = analyse(k, &v.store);
    v.counts = count_devices(v.a);
    v.sec = section(g_html[k], section_id, &v.end);
    ck_assert_msg(v.sec != NULL && v.end != NULL, "no section %s", section_id);
    return v;
}

static void view_close(lot_view *v)
{
    sl_analysis_free(v->a);
    sl_store_close(v->store);
}

static size_t wafers_with_devices(const sl_analysis *a)
{
    size_t n = 0;
    for (size_t w = 0; w < a->plan->n_wafers; w++)
        for (size_t i = 0; i < a->n_devices; i++)
            if (strcmp(a->devices[i].wafer, a->plan->wafers[w]) == 0) {
                n++;
                break;
            }
    return n;
}

/* ---- tests ------------------------------------------------------------------ */

START_TEST(test_self_contained)
{
    for (int k = 0; k < 2; k++) {
        const char *h = g_html[k];
        ck_assert_ptr_nonnull(h);
        ck_assert_msg(strncmp(h, "<!DOCTYPE html>", 15) == 0, "not an HTML document");
        ck_assert_ptr_null(strstr(h, "src=\"http"));
        ck_assert_ptr_null(strstr(h, "href=\"http"));
        ck_assert_ptr_null(strstr(h, "<link"));
        ck_assert_ptr_null(strstr(h, "<script"));
        ck_assert_ptr_null(strstr(h, "<img"));
        ck_assert_ptr_null(strstr(h, "url("));
        ck_assert_ptr_null(strstr(h, "@import"));
        ck_assert_ptr_nonnull(strstr(h, "</html>"));
        /* print rules: a page per section, charts kept whole */
        ck_assert_ptr_nonnull(strstr(h, "@media print"));
        ck_assert_ptr_nonnull(strstr(h, "section{break-before:page"));
        ck_assert_ptr_nonnull(strstr(h, "figure,svg,tr,.verdict{break-inside:avoid"));
    }
}
END_TEST

START_TEST(test_no_non_numbers_reach_the_page)
{
    for (int k = 0; k < 2; k++) {
        ck_assert_ptr_null(strstr(g_html[k], "nan"));
        ck_assert_ptr_null(strstr(g_html[k], "NaN"));
        ck_assert_ptr_null(strstr(g_html[k], ">inf"));
    }
}
END_TEST

START_TEST(test_title_is_escaped)
{
    for (int k = 0; k < 2; k++) {
        ck_assert_ptr_null(strstr(g_html[k], HOSTILE_TITLE));
        ck_assert_ptr_null(strstr(g_html[k], "<b>"));
        /* in the <title> and in the page heading */
        ck_assert_uint_ge(count(g_html[k], HOSTILE_TITLE_ESCAPED), 2);
    }
}
END_TEST

START_TEST(test_header_facts)
{
    const char *h = g_html[0];
    ck_assert_ptr_nonnull(strstr(h, "<h1>Lot report DEMO-01</h1>"));
    ck_assert_ptr_nonnull(strstr(h, "revision 1 of lot1.yaml, stored "));
    ck_assert_ptr_nonnull(strstr(h, " UTC</dd>")); /* the report's own date */
    ck_assert_ptr_nonnull(strstr(h, "not sign-off"));
    ck_assert_ptr_nonnull(strstr(h, "safety rules and licensed practice"));
    ck_assert_ptr_null(strstr(h, g_dir)); /* no path of the machine that made it */
}
END_TEST

/* Exactly one die element per die with a device, and the states as the
 * analysis has them (one device per die in these plans). */
START_TEST(test_wafer_map_dies_match_analysis)
{
    lot_view v = view_open(_i, "wafers");
    ck_assert_uint_eq(count_dies(v.sec, v.end), v.a->n_devices);
    ck_assert_uint_eq(count_dies(g_html[_i], NULL), v.a->n_devices);
    ck_assert_uint_eq(count_in(v.sec, v.end, "data-state=\"value\""), v.counts.usable_plain);
    ck_assert_uint_eq(count_in(v.sec, v.end, "data-state=\"flagged\""), v.counts.usable_flagged);
    ck_assert_uint_eq(count_in(v.sec, v.end, "data-state=\"unusable\""), v.counts.unusable);
    ck_assert_uint_eq(count_in(v.sec, v.end, "class=\"die flagged\""), v.a->n_flagged);
    ck_assert_uint_eq(count_in(v.sec, v.end, "<figure class=\"wafer\">"),
                      wafers_with_devices(v.a));
    view_close(&v);
}
END_TEST

/* The flagged count on the page equals compare's, in the verdict and on the
 * wafer maps. */
START_TEST(test_flagged_count_equals_compare)
{
    long flagged = json_number(g_json[_i], "flagged");
    ck_assert_int_gt(flagged, 0);
    char verdict[96];
    snprintf(verdict, sizeof verdict, "data-verdict=\"flagged\" data-count=\"%ld\"", flagged);
    ck_assert_ptr_nonnull(strstr(g_html[_i], verdict));
    ck_assert_uint_eq(count(g_html[_i], "class=\"die flagged\""), (size_t)flagged);
    ck_assert_uint_eq(count(g_html[_i], "<tr class=\"fa\">"), (size_t)flagged);
}
END_TEST

START_TEST(test_one_marker_per_flagged_usable_device)
{
    lot_view v = view_open(_i, "splits");
    ck_assert_uint_eq(count_in(v.sec, v.end, "class=\"point flagged\""), v.counts.usable_flagged);
    ck_assert_uint_eq(count_in(v.sec, v.end, "class=\"point\""), v.counts.usable_plain);
    /* the devices moved off (one sweep, three results) are flagged and usable */
    ck_assert_uint_ge(v.counts.usable_flagged, _i == 0 ? 1 : 3);
    /* one strip chart per dielectric */
    ck_assert_uint_eq(count_in(v.sec, v.end, "<figure class=\"strip\">"),
                      v.a->plan->n_dielectrics);
    view_close(&v);
}
END_TEST

START_TEST(test_off_plan_verdict)
{
    long off = json_number(g_json[_i], "levels_off_plan");
    ck_assert_int_ge(off, 1); /* anneal-350 delivered a quarter of its plan */
    char verdict[96];
    snprintf(verdict, sizeof verdict, "data-verdict=\"off-plan\" data-count=\"%ld\"", off);
    const char *v = strstr(g_html[_i], verdict);
    ck_assert_ptr_nonnull(v);
    const char *v_end = strstr(v, "</li>");
    ck_assert_uint_eq(count_in(v, v_end, "anneal-350"), 1);
    ck_assert_ptr_nonnull(strstr(g_html[_i], "data-verdict=\"cnp-outside\" data-count=\"0\""));
    ck_assert_ptr_nonnull(strstr(g_html[_i], "<td>off-plan</td>"));
    long differing = json_number(g_json[_i], "levels_differing");
    snprintf(verdict, sizeof verdict, "data-verdict=\"differs\" data-count=\"%ld\"", differing);
    ck_assert_ptr_nonnull(strstr(g_html[_i], verdict));
}
END_TEST

START_TEST(test_curves_of_flagged_devices)
{
    /* DEMO-01 has sweeps: the most severe flagged devices, at most 12 */
    long flagged = json_number(g_json[0], "flagged");
    size_t expected = flagged < SL_REPORT_DEFAULT_MAX_CURVES ? (size_t)flagged
                                                             : SL_REPORT_DEFAULT_MAX_CURVES;
    ck_assert_uint_eq(count(g_html[0], "<figure class=\"curve\">"), expected);
    ck_assert_ptr_nonnull(strstr(g_html[0], "gate voltage (V)"));
    /* the flagged devices with a fitted curve (outliers, off the prediction)
     * come before the shorts, opens and failed fits, however severe those */
    const char *first = strstr(g_html[0], "<figure class=\"curve\">");
    ck_assert_ptr_nonnull(first);
    const char *caption_end = strstr(first, "</figcaption>");
    ck_assert_ptr_nonnull(caption_end);
    char *caption = strndup(first, (size_t)(caption_end - first));
    ck_assert_msg(strstr(caption, "(no fitted curve)") == NULL, "first curve without a fit");
    free(caption);
    ck_assert_uint_lt(count(g_html[0], "(no fitted curve)"), expected);
    /* DEMO-02 came from results only: nothing to draw */
    ck_assert_uint_eq(count(g_html[1], "<figure class=\"curve\">"), 0);
    ck_assert_ptr_nonnull(strstr(g_html[1], "None of the flagged devices has a stored sweep."));
}
END_TEST

/* The device parameters' hover text names the device and gives the value
 * in its own unit (the chart draws log10 of mobility and n0): "W03 D001:
 * 1523 cm²/V s", as the neutrality-point chart's "W03 D001: 8.451". */
START_TEST(test_parameter_tooltips_name_devices)
{
    const char *end = NULL, *sec = section(g_html[0], "parameters", &end);
    ck_assert_ptr_nonnull(sec);
    char *params = strndup(sec, (size_t)(end - sec));
    const char *mob = strstr(params, "data-parameter=\"mobility\"");
    const char *n0 = strstr(params, "data-parameter=\"n0\"");
    ck_assert(mob && n0);
    size_t with_unit = count_in(mob, n0, " cm\xc2\xb2/V s</title>") +
                       count_in(mob, n0, " cm\xc2\xb2/V s (flagged)</title>");
    size_t n0_unit = count_in(n0, NULL, " cm\xe2\x81\xbb\xc2\xb2</title>");
    ck_assert_uint_gt(with_unit, 0);
    ck_assert_uint_gt(n0_unit, 0);
    ck_assert_uint_eq(with_unit, count_in(mob, n0, "<title>W"));
    ck_assert_ptr_null(strstr(params, "<title>ox90: "));
    free(params);
}
END_TEST

/* The parameters table: a row per split with its median and spread of
 * mobility as the analysis found them (four significant digits), the
 * units in the headings, n0 as a density; without a planned mobility in the
 * plan (plans/demo.yaml has none) every split says so and no mobility card
 * is drawn. */
START_TEST(test_parameters_table_per_split)
{
    lot_view v = view_open(_i, "parameters");
    const char *table = strstr(v.sec, "<table class=\"parameters\">");
    ck_assert(table && table < v.end);
    const char *table_end = strstr(table, "</table>");
    ck_assert_uint_eq(count_in(table, table_end, "<tr data-split=\""), v.a->n_splits);
    const char *units[] = { "mobility median (cm&sup2;/V&nbsp;s)",
                            "n<sub>0</sub> median (cm<sup>&minus;2</sup>)",
                            "hysteresis median (V)", "planned mobility (cm&sup2;/V&nbsp;s)" };
    for (size_t u = 0; u < sizeof units / sizeof *units; u++)
        ck_assert_ptr_nonnull(strstr(table, units[u]));
    for (size_t k = 0; k < v.a->n_splits; k++) {
        const sl_analyze_split *sp = &v.a->splits[k];
        char row[512];
        snprintf(row, sizeof row,
                 "<tr data-split=\"%s\" data-mobility-off-plan=\"-1\"><td>%s</td>"
                 "<td class=\"num\">%.4g</td><td class=\"num\">%.4g</td>"
                 "<td class=\"num\">n/a</td><td class=\"num\">n/a</td><td>no plan value</td>"
                 "<td class=\"num\">",
                 v.a->plan->splits[k].name, v.a->plan->splits[k].name,
                 sp->mobility_median_cm2_per_Vs, sp->mobility_spread_cm2_per_Vs);
        const char *at = strstr(table, row);
        ck_assert_msg(at && at < table_end, "no row %s", row);
        ck_assert(isfinite(sp->n0_median_per_cm2));
        ck_assert_ptr_eq(strstr(at + strlen(row), "&times;10<sup>"), at + strlen(row) + 4);
    }
    ck_assert_ptr_null(strstr(g_html[_i], "data-verdict=\"mobility-off-plan\""));
    view_close(&v);
}
END_TEST

/* The demo plan with a planned mobility for each dielectric: ox90 at the
 * simulator's median (2000 cm^2/Vs, src/simulate.c) with sigma 300, alox20
 * at 5000 +/- 500, which the simulated devices miss by far. */
static int mobility_plan_line(char *out, size_t cap, const char *line, size_t row, void *ctx)
{
    (void)row;
    (void)ctx;
    if (strncmp(line, "lot:", 4) == 0)
        return snprintf(out, cap, "lot: MU-01\n") > 0;
    if (strstr(line, "doping_per_cm2: { mean: 0, sigma: 0.2e12 }"))
        return snprintf(out, cap, "%s\n    mobility_cm2_per_Vs: { mean: 2000, sigma: 300 }\n",
                        line) > 0;
    if (strstr(line, "doping_per_cm2: { mean: 0.5e12, sigma: 0.3e12 }"))
        return snprintf(out, cap, "%s\n    mobility_cm2_per_Vs: { mean: 5000, sigma: 500 }\n",
                        line) > 0;
    return 0;
}

/* With planned mobilities: the mobility card counts the splits compare
 * judges off plan and names them, their rows are marked, each row shows
 * its dielectric's planned value, and the mobility chart draws it. */
START_TEST(test_planned_mobility_card_and_rows)
{
    char *demo = sl_test_path(SL_SOURCE_DIR, "plans/demo.yaml");
    char *path = sl_test_path(g_dir, "mu.yaml");
    ck_assert_uint_eq(edit_lines(demo, path, mobility_plan_line, NULL), 3);
    const char *steps[][12] = {
        { "predict", "mu.yaml", "--db", "mu.db", NULL },
        { "simulate", "mu.yaml", "--out", "sim-mu", "--seed", "4", "--no-sweeps", NULL },
        { "ingest", "--lot", "MU-01", "--results", "sim-mu/results.csv", "--db", "mu.db", NULL },
        { "report", "--lot", "MU-01", "--out", "mu.html", "--db", "mu.db", NULL },
    };
    for (size_t i = 0; i < sizeof steps / sizeof steps[0]; i++)
        run_ok(steps[i]);
    const char *cmp[] = { "compare", "--lot", "MU-01", "--db", "mu.db", "--format", "json", NULL };
    sl_run_result r = sl_test_run(g_dir, NULL, cmp);
    ck_assert_int_eq(r.exit_code, 0);
    long off = json_number(r.out, "splits_mobility_off_plan");
    ck_assert_int_eq(off, 4); /* the four alox20 splits */
    char *html_path = sl_test_path(g_dir, "mu.html");
    char *html = sl_test_read_file(html_path, NULL);
    char card[96];
    snprintf(card, sizeof card, "data-verdict=\"mobility-off-plan\" data-count=\"%ld\"", off);
    const char *at = strstr(html, card);
    ck_assert_ptr_nonnull(at);
    const char *card_end = strstr(at, "</li>");
    ck_assert_uint_eq(count_in(at, card_end, "alox20"), 4);
    ck_assert_uint_eq(count(html, "data-mobility-off-plan=\"1\""), (size_t)off);
    ck_assert_uint_eq(count(html, "<tr class=\"bad\" data-split=\"alox20"), (size_t)off);
    ck_assert_uint_eq(count(html, "data-mobility-off-plan=\"0\""), 4);
    ck_assert_uint_eq(count(html, "<td class=\"num\">5000</td><td class=\"num\">500</td>"
                                  "<td>off plan</td>"), 4);
    ck_assert_uint_eq(count(html, "<td class=\"num\">2000</td><td class=\"num\">300</td>"
                                  "<td>as planned</td>"), 4);
    const char *mob = strstr(html, "data-parameter=\"mobility\"");
    const char *n0 = strstr(html, "data-parameter=\"n0\"");
    ck_assert(mob && n0);
    ck_assert_uint_eq(count_in(mob, n0, "class=\"predicted\""), 8); /* a line per split */
    free(html);
    free(html_path);
    sl_run_result_free(&r);
    free(path);
    free(demo);
}
END_TEST

START_TEST(test_history_with_two_lots)
{
    const char *end;
    const char *sec = section(g_html[1], "history", &end);
    ck_assert_ptr_nonnull(sec);
    ck_assert_ptr_nonnull(strstr(g_html[1], "<a href=\"#history\">"));
    ck_assert_uint_ge(count_in(sec, end, "<figure class=\"history\">"), 1);
    /* every history chart names the planned value beside the pool */
    ck_assert_uint_eq(count_in(sec, end, "; planned "), count_in(sec, end, "<figure class=\"history\">"));
    ck_assert_uint_eq(count_in(sec, end, "dy=\".32em\">planned "), count_in(sec, end, "<figure class=\"history\">"));
    ck_assert_uint_eq(count_in(sec, end, "<tr><td>anneal</td><td>anneal-350</td><td class=\"num\">2</td>"), 1);
    const char *rep[] = { "report", "--lot", "DEMO-02", "--out", "nh.html", "--db", "t.db",
                          "--no-history", NULL };
    run_ok(rep);
    char *path = sl_test_path(g_dir, "nh.html");
    char *html = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(html);
    ck_assert_ptr_null(strstr(html, "<section id=\"history\">"));
    ck_assert_ptr_null(strstr(html, "#history"));
    free(html);
    free(path);
}
END_TEST

/* DEMO-01 rendered by the library into a malloc'd string; with the lot's
 * device and dielectric counts for comparison. */
static char *render_demo01(sl_report_summary *summary, const sl_report_options *opts,
                           size_t *n_devices, size_t *n_dielectrics)
{
    sl_store *store = NULL;
    sl_analysis *a = analyse(0, &store);
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_report_render(&b, summary, store, a, opts, NULL), SL_OK);
    *n_devices = a->n_devices;
    *n_dielectrics = a->plan->n_dielectrics;
    sl_analysis_free(a);
    sl_store_close(store);
    return sl_chart_buf_detach(&b);
}

/* The library: same lot and date, same bytes; the summary tells the truth. */
START_TEST(test_render_is_deterministic)
{
    sl_report_options opts;
    sl_report_options_default(&opts);
    opts.generated_utc = FIXED_DATE;
    sl_report_summary s1, s2;
    size_t n_devices, n_dielectrics;
    char *h1 = render_demo01(&s1, &opts, &n_devices, &n_dielectrics);
    char *h2 = render_demo01(&s2, &opts, &n_devices, &n_dielectrics);
    ck_assert_str_eq(h1, h2);
    ck_assert_ptr_nonnull(strstr(h1, FIXED_DATE));
    ck_assert_uint_eq(s1.bytes, strlen(h1));
    ck_assert_uint_eq(s1.n_dies, n_devices);
    ck_assert_uint_eq(s1.n_dies, count_dies(h1, NULL));
    ck_assert_uint_eq(s1.n_wafer_maps, count(h1, "<figure class=\"wafer\">"));
    ck_assert_uint_eq(s1.n_strip_charts, n_dielectrics);
    ck_assert_uint_eq(s1.n_dies_off_grid, 0);
    free(h1);
    free(h2);
}
END_TEST

/* The page of a streamed analysis equals the page of the same analysis in
 * memory, byte for byte (history off: the stream holds the store's
 * scratch), for both lots. */
START_TEST(test_stream_renders_the_same_page)
{
    sl_report_options opts;
    sl_report_options_default(&opts);
    opts.generated_utc = FIXED_DATE;
    opts.with_history = 0;
    sl_store *store = NULL;
    sl_analysis *a = analyse(_i, &store);
    sl_chart_buf mem, str;
    sl_chart_buf_init(&mem);
    sl_chart_buf_init(&str);
    sl_report_summary s_mem, s_str;
    ck_assert_int_eq(sl_report_render(&mem, &s_mem, store, a, &opts, NULL), SL_OK);
    sl_analysis_free(a);
    sl_diag *diag = sl_diag_new();
    sl_analysis_stream *stream = NULL;
    ck_assert_int_eq(sl_analyze_lot_stream(&stream, store, g_lots[_i], diag), SL_OK);
    ck_assert_int_eq(sl_report_render_stream(&str, &s_str, store, stream, &opts, diag), SL_OK);
    sl_analysis_stream_free(stream);
    ck_assert_str_eq(sl_chart_buf_str(&mem), sl_chart_buf_str(&str));
    ck_assert_uint_eq(s_mem.n_dies, s_str.n_dies);
    ck_assert_uint_eq(s_mem.n_curves, s_str.n_curves);
    sl_chart_buf_free(&mem);
    sl_chart_buf_free(&str);
    sl_diag_free(diag);
    sl_store_close(store);
}
END_TEST

/* The band drawn is the interval the flags use: one flag-interval band per
 * split, named in every strip's legend; a usable device lies outside its
 * split's interval exactly when it is flagged off-prediction. */
START_TEST(test_band_is_the_flag_interval)
{
    lot_view v = view_open(_i, "splits");
    ck_assert_uint_eq(count_in(v.sec, v.end, "class=\"band sigma3 flag-interval\""),
                      v.a->n_splits);
    ck_assert_uint_eq(count_in(v.sec, v.end, ">flag interval</text>"), v.a->plan->n_dielectrics);
    ck_assert_uint_eq(count_in(v.sec, v.end, "3\xcf\x83</text>"), 0); /* no +/-3 sigma band */
    size_t outside = 0;
    for (size_t i = 0; i < v.a->n_devices; i++) {
        const sl_analyze_device *d = &v.a->devices[i];
        if (!isfinite(d->cnp_measured_V))
            continue;
        const sl_analyze_split *sp = &v.a->splits[d->split];
        int out = d->cnp_measured_V < sp->flag_low_V || d->cnp_measured_V > sp->flag_high_V;
        ck_assert_int_eq(out, (d->flags & SL_FLAG_OFF_PREDICTION) != 0);
        outside += out;
    }
    ck_assert_uint_ge(outside, _i == 0 ? 1 : 3);
    view_close(&v);
}
END_TEST

/* One colour scale and one legend for every wafer map: the lot's. */
START_TEST(test_one_colour_scale_per_lot)
{
    lot_view v = view_open(_i, "wafers");
    ck_assert_uint_eq(count_in(v.sec, v.end, "<figure class=\"wafer-legend\""), 1);
    ck_assert_uint_eq(count_in(v.sec, v.end, ">no device at this die</text>"), 1);
    ck_assert_uint_eq(count_in(v.sec, v.end, ">no usable device</text>"), 1);
    ck_assert_uint_eq(count_in(v.sec, v.end, "<g class=\"die-axis\">"),
                      count_in(v.sec, v.end, "<figure class=\"wafer\">"));
    view_close(&v);
}
END_TEST

START_TEST(test_no_curves_when_capped_at_zero)
{
    sl_report_options opts;
    sl_report_options_default(&opts);
    opts.max_curves = 0;
    opts.with_history = 0;
    sl_report_summary s;
    size_t n_devices, n_dielectrics;
    char *h = render_demo01(&s, &opts, &n_devices, &n_dielectrics);
    ck_assert_uint_eq(s.n_curves, 0);
    ck_assert_ptr_null(strstr(h, "<section id=\"curves\">"));
    ck_assert_ptr_null(strstr(h, "#curves"));
    ck_assert_ptr_null(strstr(h, "<section id=\"history\">"));
    ck_assert_ptr_nonnull(strstr(h, "<section id=\"failure-analysis\">"));
    free(h);
}
END_TEST

/* Every flagged device of DEMO-01 has a sweep; the one moved along the gate
 * axis was fitted, so its curve has the model beside the points. */
START_TEST(test_fitted_curve_of_an_outlier)
{
    sl_report_options opts;
    sl_report_options_default(&opts);
    opts.max_curves = 1000;
    sl_report_summary s;
    size_t n_devices, n_dielectrics;
    char *h = render_demo01(&s, &opts, &n_devices, &n_dielectrics);
    long flagged = json_number(g_json[0], "flagged");
    ck_assert_uint_eq(s.n_curves, (size_t)flagged);
    ck_assert_uint_eq(count(h, "<figure class=\"curve\">"), (size_t)flagged);
    ck_assert_uint_ge(count(h, ">fitted model</text>"), 1);
    ck_assert_uint_ge(count(h, "far above the other devices of its wafer"), 1);
    free(h);
}
END_TEST

/* A lot fitted with the two-mobility model (ingest --model two-mobility):
 * the analysis carries each device's own electron and hole mobilities, and
 * the report draws the fitted curve with that model, so a device whose
 * mobilities differ gets a curve that is not the symmetric one. */
START_TEST(test_two_mobility_curves_use_their_model)
{
    const char *predict[] = { "predict", "lot1.yaml", "--db", "tm.db", NULL };
    const char *ingest[] = { "ingest", "--lot", "DEMO-01", "--sweeps", "sim1/sweeps.csv",
                             "--model", "two-mobility", "--db", "tm.db", NULL };
    run_ok(predict);
    run_ok(ingest);
    char *db = sl_test_path(g_dir, "tm.db");
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_analysis *a = NULL;
    ck_assert_int_eq(sl_test_store_open(&store, db, diag), SL_OK);
    ck_assert_int_eq(sl_analyze_lot(&a, store, "DEMO-01", diag), SL_OK);
    size_t asymmetric = 0, two_mobility = 0;
    for (size_t i = 0; i < a->n_devices; i++) {
        const sl_analyze_device *d = &a->devices[i];
        if (strcmp(d->fit_class, "ok") != 0)
            continue;
        ck_assert_msg(strncmp(d->fit_model, "two-mobility", 12) == 0, "%s", d->fit_model);
        two_mobility++;
        ck_assert(isfinite(d->electron_mobility_cm2_per_Vs) && isfinite(d->hole_mobility_cm2_per_Vs));
        asymmetric += fabs(d->electron_mobility_cm2_per_Vs / d->hole_mobility_cm2_per_Vs - 1.0) > 1e-3;
    }
    ck_assert_uint_gt(two_mobility, 0);
    ck_assert_uint_gt(asymmetric, 0); /* noise alone moves a free ratio off 1 */
    sl_report_options opts;
    sl_report_options_default(&opts);
    opts.max_curves = 1000;
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_report_summary s;
    ck_assert_int_eq(sl_report_render(&b, &s, store, a, &opts, NULL), SL_OK);
    char *h = sl_chart_buf_detach(&b);
    ck_assert_uint_ge(count(h, ">fitted model</text>"), 1);
    free(h);
    sl_analysis_free(a);
    sl_store_close(store);
    sl_diag_free(diag);
    free(db);
}
END_TEST

START_TEST(test_effects_note_when_not_estimable)
{
    char *path = sl_test_path(g_dir, "r3.html");
    char *h = sl_test_read_file(path, NULL);
    ck_assert_ptr_nonnull(h);
    const char *end;
    const char *sec = section(h, "effects", &end);
    ck_assert_ptr_nonnull(sec);
    ck_assert_uint_eq(count_in(sec, end, "<p class=\"note\">effects not estimated: "), 1);
    ck_assert_uint_eq(count_in(sec, end, "<figure"), 0);
    ck_assert_ptr_nonnull(strstr(h, "data-verdict=\"off-plan\" data-count=\"0\""));
    ck_assert_ptr_nonnull(strstr(h, "(effects could not be estimated)"));
    free(h);
    free(path);
}
END_TEST

START_TEST(test_write_file_is_atomic)
{
    sl_diag *diag = sl_diag_new();
    char *path = sl_test_path(g_dir, "atomic.html");
    char *tmp = sl_test_path(g_dir, "atomic.html.tmp");
    ck_assert_int_eq(sl_test_write_file(path, "old"), 0);
    ck_assert_int_eq(sl_report_write_file(path, "new text", 8, diag), SL_OK);
    char *text = sl_test_read_file(path, NULL);
    ck_assert_str_eq(text, "new text");
    ck_assert_int_ne(access(tmp, F_OK), 0);
    free(text);
    /* a folder that does not exist: an error naming the file, nothing left */
    char *bad = sl_test_path(g_dir, "missing/r.html");
    ck_assert_int_eq(sl_report_write_file(bad, "x", 1, diag), SL_EIO);
    ck_assert_ptr_nonnull(strstr(sl_diag_last(diag), "missing/r.html.tmp"));
    free(bad);
    free(tmp);
    free(path);
    sl_diag_free(diag);
}
END_TEST

START_TEST(test_command_errors)
{
    const char *no_lot[] = { "report", "--out", "x.html", "--db", "t.db", NULL };
    const char *no_out[] = { "report", "--lot", "DEMO-01", "--db", "t.db", NULL };
    const char *unknown[] = { "report", "--lot", "NOPE", "--out", "x.html", "--db", "t.db", NULL };
    const char *no_db[] = { "report", "--lot", "DEMO-01", "--out", "x.html", "--db", "none.db", NULL };
    const char *bad_dir[] = { "report", "--lot", "DEMO-01", "--out", "no/such/dir.html", "--db",
                              "t.db", NULL };
    const char *const *cases[] = { no_lot, no_out, unknown, no_db };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        sl_run_result r = sl_test_run(g_dir, NULL, cases[i]);
        ck_assert_int_eq(r.exit_code, 2);
        ck_assert_ptr_nonnull(strstr(r.err, "error"));
        sl_run_result_free(&r);
    }
    sl_run_result r = sl_test_run(g_dir, NULL, bad_dir);
    ck_assert_int_eq(r.exit_code, 1);
    ck_assert_ptr_nonnull(strstr(r.err, "cannot write"));
    sl_run_result_free(&r);
    char *x = sl_test_path(g_dir, "x.html");
    ck_assert_int_ne(access(x, F_OK), 0);
    free(x);
    const char *help[] = { "report", "--help", NULL };
    r = sl_test_run(g_dir, NULL, help);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_ptr_nonnull(strstr(r.out, "usage: splitlot report --lot ID --out FILE.html"));
    sl_run_result_free(&r);
}
END_TEST

START_TEST(test_command_summary)
{
    const char *rep[] = { "report", "--lot", "DEMO-01", "--out", "s.html", "--db", "t.db",
                          "--max-curves", "3", NULL };
    sl_run_result r = sl_test_run(g_dir, NULL, rep);
    ck_assert_int_eq(r.exit_code, 0);
    ck_assert_ptr_nonnull(strstr(r.out, "wrote s.html: "));
    ck_assert_ptr_nonnull(strstr(r.out, " 3 transfer curves"));
    sl_run_result_free(&r);
}
END_TEST

/* Instrument fixtures (tests/data/instrument): a lot of double sweeps gets a
 * hysteresis section with one strip chart and its devices beyond the plan's
 * max_hysteresis_V as diamonds, its 1-based prober dies all on the maps; a
 * lot of four devices per die shows each die's median with the count. */
static char *instrument_report(const char *plan, const char *lot, const char *file)
{
    char *dir = sl_test_tmpdir(), rel[256];
    snprintf(rel, sizeof rel, "instrument/%s", plan);
    char *plan_path = sl_test_data(rel);
    snprintf(rel, sizeof rel, "instrument/%s", file);
    char *data = sl_test_data(rel);
    const char *predict[] = { "predict", plan_path, "--db", "i.db", NULL };
    const char *ingest[] = { "ingest", "--lot", lot, "--sweeps", data, "--db", "i.db", NULL };
    const char *report[] = { "report", "--lot", lot, "--db", "i.db", "--out", "i.html", NULL };
    const char *const *steps[] = { predict, ingest, report };
    for (int i = 0; i < 3; i++) {
        sl_run_result r = sl_test_run(dir, NULL, steps[i]);
        ck_assert_msg(r.exit_code == 0, "%s: %s", steps[i][0], r.err);
        ck_assert_msg(i < 2 || strstr(r.err, "outside the plan's die grid") == NULL, "%s", r.err);
        sl_run_result_free(&r);
    }
    char *html_path = sl_test_path(dir, "i.html");
    char *html = sl_test_read_file(html_path, NULL);
    ck_assert_ptr_nonnull(html);
    free(html_path);
    free(data);
    free(plan_path);
    sl_test_rmtree(dir);
    free(dir);
    return html;
}

START_TEST(test_instrument_lots)
{
    char *html = instrument_report("alox.yaml", "INST-ALOX", "alox_double.csv");
    const char *end = NULL, *hyst = section(html, "hysteresis", &end);
    ck_assert_ptr_nonnull(hyst);
    ck_assert_uint_eq(count_in(hyst, end, "<figure class=\"strip hysteresis\">"), 1);
    /* the truth file has 7 devices beyond 1.5 V; compare flags the same 7 */
    ck_assert_uint_eq(count_in(hyst, end, "point flagged"), 7);
    ck_assert_ptr_nonnull(strstr(html, "href=\"#hysteresis\""));
    /* a chart per parameter, each axis in its unit, and each split's
     * hysteresis median and spread in the parameters table */
    const char *params = section(html, "parameters", &end);
    ck_assert_ptr_nonnull(params);
    const char *axes[] = { "data-parameter=\"mobility\"", "data-parameter=\"n0\"",
                           "data-parameter=\"hysteresis\"",
                           "mobility (log\xe2\x82\x81\xe2\x82\x80 cm\xc2\xb2/V s)",
                           "n\xe2\x82\x80 (log\xe2\x82\x81\xe2\x82\x80 cm\xe2\x81\xbb\xc2\xb2)",
                           ">hysteresis (V)<" };
    for (size_t i = 0; i < sizeof axes / sizeof *axes; i++)
        ck_assert_msg(count_in(params, end, axes[i]) == 1, "%s", axes[i]);
    const char *table = strstr(params, "<table class=\"parameters\">");
    ck_assert(table && table < end);
    const char *table_end = strstr(table, "</table>");
    ck_assert_uint_gt(count_in(table, table_end, "<tr data-split="), 0);
    ck_assert_uint_eq(count_in(table, table_end, "<td class=\"num\">n/a</td></tr>"), 0);
    const char *maps = section(html, "wafers", &end);
    ck_assert_uint_eq(count_dies(maps, end), 32); /* 4 wafers x 8 devices, dies from (1, 1) */
    free(html);
    html = instrument_report("types.yaml", "INST-TYPES", "types_sweeps.csv");
    ck_assert_ptr_null(strstr(html, "<section id=\"hysteresis\">"));
    maps = section(html, "wafers", &end);
    ck_assert_uint_eq(count_dies(maps, end), 18); /* 2 wafers x 9 dies, 4 devices each */
    ck_assert_uint_eq(count_in(maps, end, "median of 4 usable of 4 devices"), 18);
    ck_assert_ptr_nonnull(strstr(maps, "id=\"wafer-dies-shared\">4 devices per die"));
    free(html);
}
END_TEST

/* ---- a lot too large for a point per device ------------------------------ */

static const char large_plan[] =
    "lot: LARGE-01\n"
    "title: one split of many devices (invented)\n"
    "graphene: { fermi_velocity_m_s: 1.0e6, disorder_density_per_cm2: 1.5e11 }\n"
    "temperatures_K: [300]\n"
    "device: { channel_length_um: 20, channel_width_um: 10 }\n"
    "wafer_map: { rows: 8, cols: 8 }\n"
    "expected_yield: 1.0\n"
    "baseline_doping_per_cm2: { mean: -2.0e12, sigma: 0.8e12 }\n"
    "dielectrics:\n"
    "  - name: ox90\n"
    "    layers: [ { material: SiO2, thickness_nm: 90, sigma_nm: 2 } ]\n"
    "    gate_range_V: [-40, 40]\n"
    "design:\n"
    "  kind: full-factorial\n"
    "  factors:\n"
    "    dielectric: [ox90]\n"
    "  wafers_per_split: 2\n"
    "wafers: 2\n"
    "devices_per_wafer: 64\n"
    "seed: 3\n";

/* Sum of the counts in the density bars' tooltips ("N devices, ..."). */
static size_t binned_devices(const char *html)
{
    size_t n = 0;
    for (const char *p = strstr(html, "<rect class=\"bin\""); p; p = strstr(p + 1, "<rect class=\"bin\""))
        n += (size_t)strtoul(strstr(p, "<title>") + 7, NULL, 10);
    return n;
}

/* 4,800 devices on 2 wafers of 64 dies, 30 % of them faulty: the split's
 * strip is binned (every usable device either in a bin or drawn as a
 * flagged point), the maps keep one cell per die, the failure list stops
 * at 1,000 rows and says where the rest are. */
START_TEST(test_large_split_is_binned)
{
    char *dir = sl_test_tmpdir();
    char *plan = sl_test_path(dir, "large.yaml");
    ck_assert_int_eq(sl_test_write_file(plan, large_plan), 0);
    const char *steps[][14] = {
        { "predict", "large.yaml", "--db", "l.db", NULL },
        { "simulate", "large.yaml", "--out", "sim", "--seed", "5", "--no-sweeps",
          "--devices-per-wafer", "2400", "--fault-fraction", "0.3", NULL },
        { "ingest", "--lot", "LARGE-01", "--results", "sim/results.csv", "--db", "l.db", NULL },
        { "report", "--lot", "LARGE-01", "--out", "l.html", "--db", "l.db", NULL },
    };
    for (size_t i = 0; i < sizeof steps / sizeof steps[0]; i++) {
        sl_run_result r = sl_test_run(dir, NULL, steps[i]);
        ck_assert_msg(r.exit_code == 0, "%s: %s", steps[i][0], r.err);
        sl_run_result_free(&r);
    }
    char *path = sl_test_path(dir, "l.html");
    size_t len = 0;
    char *html = sl_test_read_file(path, &len);
    char *db = sl_test_path(dir, "l.db");
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_analysis *a = NULL;
    ck_assert_int_eq(sl_test_store_open(&store, db, diag), SL_OK);
    ck_assert_int_eq(sl_analyze_lot(&a, store, "LARGE-01", diag), SL_OK);
    size_t usable_flagged = 0;
    for (size_t i = 0; i < a->n_devices; i++)
        usable_flagged += isfinite(a->devices[i].cnp_measured_V) && a->devices[i].flags;
    ck_assert_uint_gt(a->splits[0].n_usable, 3000);
    ck_assert_uint_le(usable_flagged, 400);
    const char *end = NULL, *sec = section(html, "splits", &end);
    char *splits = strndup(sec, (size_t)(end - sec));
    ck_assert_uint_gt(count(splits, "<rect class=\"bin\""), 10);
    ck_assert_uint_eq(binned_devices(splits) + count(splits, "class=\"point flagged\""),
                      a->splits[0].n_usable);
    ck_assert_uint_eq(count(splits, "class=\"point flagged\""), usable_flagged);
    ck_assert_uint_eq(count(splits, "class=\"point\""), 0);
    free(splits);
    /* the parameters' strips are binned too: every usable device with a
     * mobility in a bin or a point */
    sec = section(html, "parameters", &end);
    const char *mob = strstr(sec, "data-parameter=\"mobility\"");
    ck_assert_ptr_nonnull(mob);
    char *mobility = strndup(mob, (size_t)(strstr(mob, "</figure>") - mob));
    ck_assert_uint_eq(binned_devices(mobility) + count(mobility, "class=\"point flagged\""),
                      a->splits[0].n_usable);
    free(mobility);
    ck_assert_uint_eq(count_dies(html, NULL), 128);
    ck_assert_uint_gt(a->n_flagged, 1000);
    ck_assert_uint_eq(count(html, "<tr class=\"fa\">"), 1000);
    char note[96];
    snprintf(note, sizeof note, "The 1000 most severe of %zu flagged devices", a->n_flagged);
    ck_assert_ptr_nonnull(strstr(html, note));
    ck_assert_uint_lt(len, 1000000);
    sl_analysis_free(a);
    sl_store_close(store);
    sl_diag_free(diag);
    free(html);
    free(path);
    free(db);
    free(plan);
    sl_test_rmtree(dir);
    free(dir);
}
END_TEST

static Suite *report_suite(void)
{
    Suite *s = suite_create("report");
    TCase *tc = tcase_create("lots");
    tcase_add_unchecked_fixture(tc, build_lots, remove_lots);
    tcase_set_timeout(tc, 300);
    tcase_add_test(tc, test_self_contained);
    tcase_add_test(tc, test_no_non_numbers_reach_the_page);
    tcase_add_test(tc, test_title_is_escaped);
    tcase_add_test(tc, test_header_facts);
    tcase_add_loop_test(tc, test_wafer_map_dies_match_analysis, 0, 2);
    tcase_add_loop_test(tc, test_flagged_count_equals_compare, 0, 2);
    tcase_add_loop_test(tc, test_one_marker_per_flagged_usable_device, 0, 2);
    tcase_add_loop_test(tc, test_off_plan_verdict, 0, 2);
    tcase_add_test(tc, test_curves_of_flagged_devices);
    tcase_add_test(tc, test_parameter_tooltips_name_devices);
    tcase_add_loop_test(tc, test_parameters_table_per_split, 0, 2);
    tcase_add_test(tc, test_planned_mobility_card_and_rows);
    tcase_add_test(tc, test_history_with_two_lots);
    tcase_add_test(tc, test_fitted_curve_of_an_outlier);
    tcase_add_test(tc, test_two_mobility_curves_use_their_model);
    tcase_add_test(tc, test_effects_note_when_not_estimable);
    tcase_add_test(tc, test_render_is_deterministic);
    tcase_add_loop_test(tc, test_stream_renders_the_same_page, 0, 2);
    tcase_add_loop_test(tc, test_band_is_the_flag_interval, 0, 2);
    tcase_add_loop_test(tc, test_one_colour_scale_per_lot, 0, 2);
    tcase_add_test(tc, test_no_curves_when_capped_at_zero);
    tcase_add_test(tc, test_write_file_is_atomic);
    tcase_add_test(tc, test_command_errors);
    tcase_add_test(tc, test_command_summary);
    tcase_add_test(tc, test_instrument_lots);
    suite_add_tcase(s, tc);
    TCase *large = tcase_create("large");
    tcase_set_timeout(large, 300);
    tcase_add_test(large, test_large_split_is_binned);
    suite_add_tcase(s, large);
    return s;
}

int main(void) { return sl_test_main(report_suite()); }
