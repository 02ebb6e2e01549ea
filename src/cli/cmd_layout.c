/* SPDX-License-Identifier: MIT
 * `splitlot layout PLAN`: the splits and their wafers, every wafer with its
 * split, processing order and loads, the loads of batched steps, the alias
 * structure of a fractional design, and per level the power of the analysis
 * (optionally checked by simulated lots), as a table, CSV or JSON (keys of
 * docs/formats.md).
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"

static const char usage[] =
    "usage: splitlot layout PLAN [--simulate N] [--threads N] [--format table|csv|json]\n\n"
    "Assign the plan's wafers to its splits, the wafers of batched steps to\n"
    "loads, and order their processing, all randomised from the plan's seed\n"
    "(the same seed gives the same layout). Per level: the standard error of\n"
    "its effect from the wafer means, its df, and the power to judge it\n"
    "off-plan when it misses by its tolerance plus the plan's shift; the\n"
    "wafers per split that power needs; 'enough' when the lot has them.\n\n"
    "  --simulate N      also simulate N lots of the plan in memory, analyse each\n"
    "                    as compare does, and show the observed rates\n"
    "  --threads N       workers for --simulate (default 2)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_FORMAT = 1, OPT_SIMULATE, OPT_THREADS, OPT_HELP };

static const struct option options[] = {
    { "format", required_argument, NULL, OPT_FORMAT },
    { "simulate", required_argument, NULL, OPT_SIMULATE },
    { "threads", required_argument, NULL, OPT_THREADS },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    const sl_plan *plan;
    const sl_layout *layout;
    const sl_layout_mc *mc;  /* NULL without --simulate */
    cli_format format;
} layout_view;

/* The columns naming a split, shared by both tables. */
static void split_columns(cli_table *t)
{
    cli_table_col_str(t, "split", "split");
    cli_table_col_str(t, "dielectric", "stack");
    cli_table_col_list(t, "treatments", "treatments");
}

static void split_cells(cli_table *t, const sl_plan *plan, size_t split, const char **names)
{
    cli_cell_str(t, plan->splits[split].name);
    cli_cell_str(t, plan->dielectrics[plan->splits[split].dielectric].name);
    cli_cell_list(t, names, cli_split_treatment_names(plan, split, names, plan->n_treatments));
}

static void splits_table(cli_doc *doc, const sl_plan *plan, const sl_layout *l)
{
    cli_table *t = cli_doc_table(doc, "splits", "splits");
    split_columns(t);
    cli_table_col_list(t, "wafers", "wafers");
    cli_table_col_fixed(t, "devices_available", "usable devices (expected)", 1);
    const char **names = calloc(plan->n_treatments + l->n_wafers + 1, sizeof *names);
    if (!names)
        return;
    for (size_t s = 0; s < l->n_splits; s++) {
        const sl_layout_split *sp = &l->splits[s];
        cli_table_row(t);
        split_cells(t, plan, s, names);
        for (size_t w = 0; w < sp->n_wafers; w++)
            names[w] = l->wafers[sp->wafers[w]].wafer;
        cli_cell_list(t, names, (int)sp->n_wafers);
        cli_cell_num(t, sp->devices_available);
    }
    free(names);
}

/* step -> load number of the batched steps the wafer goes through. */
static void batch_cell(cli_table *t, const sl_plan *plan, const sl_layout_wafer *w,
                       const char **keys, long *values)
{
    int n = 0;
    for (size_t b = 0; w->load && b < plan->n_batches; b++)
        if (w->load[b] > 0) {
            keys[n] = plan->batches[b].step;
            values[n++] = (long)w->load[b];
        }
    cli_cell_object(t, keys, values, n);
}

static void wafers_table(cli_doc *doc, const sl_plan *plan, const sl_layout *l)
{
    cli_table *t = cli_doc_table(doc, "wafers", "wafers");
    cli_table_col_str(t, "wafer", "wafer");
    split_columns(t);
    cli_table_col_int(t, "process_order", "order");
    cli_table_col_object(t, "batches", "loads");
    const char **names = calloc(plan->n_treatments + plan->n_batches + 1, sizeof *names);
    long *values = calloc(plan->n_batches + 1, sizeof *values);
    for (size_t i = 0; names && values && i < l->n_wafers; i++) {
        const sl_layout_wafer *w = &l->wafers[i];
        cli_table_row(t);
        cli_cell_str(t, w->wafer);
        if (w->split < 0) {
            cli_cell_str(t, "spare");
            cli_cell_str(t, "");
            cli_cell_list(t, names, 0);
            cli_cell_num(t, NAN);
        } else {
            split_cells(t, plan, (size_t)w->split, names);
            cli_cell_int(t, (long)w->process_order);
        }
        batch_cell(t, plan, w, names, values);
    }
    free(names);
    free(values);
}

static void loads_table(cli_doc *doc, const sl_plan *plan, const sl_layout *l)
{
    if (plan->n_batches == 0)
        return;
    cli_table *t = cli_doc_table(doc, "loads", "loads of batched steps (in processing order)");
    cli_table_col_str(t, "step", "step");
    cli_table_col_int(t, "load", "load");
    cli_table_col_int(t, "capacity", "capacity");
    cli_table_col_list(t, "wafers", "wafers");
    const char **names = calloc(l->n_wafers + 1, sizeof *names);
    for (size_t k = 0; names && k < l->n_loads; k++) {
        const sl_layout_load *load = &l->loads[k];
        cli_table_row(t);
        cli_cell_str(t, plan->batches[load->batch].step);
        cli_cell_int(t, (long)load->number);
        cli_cell_int(t, plan->batches[load->batch].capacity);
        for (size_t w = 0; w < load->n_wafers; w++)
            names[w] = l->wafers[load->wafers[w]].wafer;
        cli_cell_list(t, names, (int)load->n_wafers);
    }
    free(names);
}

static const char *verdict_text(sl_layout_verdict v)
{
    return v == SL_LAYOUT_ENOUGH ? "yes" : (v == SL_LAYOUT_TOO_FEW ? "no" : "unknown");
}

static void levels_columns(cli_table *t, const layout_view *v)
{
    cli_table_col_str(t, "factor", "factor");
    cli_table_col_str(t, "level", "level");
    cli_table_col_int(t, "wafers", "wafers");
    cli_table_col_num(t, "effect_se_per_cm2", "SE/cm2", 3);
    cli_table_col_int(t, "df", "df");
    cli_table_col_num(t, "tolerance_per_cm2", "T/cm2", 3);
    cli_table_col_num(t, "shift_per_cm2", "shift", 3);
    cli_table_col_fixed(t, "power", "power", 3);
    cli_table_col_int(t, "wafers_per_split_needed", "need");
    if (v->format == CLI_FORMAT_TABLE)
        cli_table_col_str(t, "enough", "enough");
    else
        cli_table_col_bool(t, "enough", "enough");
    if (v->mc) {
        cli_table_col_fixed(t, "observed_power", "seen", 3);
        cli_table_col_fixed(t, "false_verdict_rate", "false", 4);
        cli_table_col_fixed(t, "observed_false_verdict_rate", "seen", 4);
    }
}

static void levels_table(cli_doc *doc, const layout_view *v)
{
    const sl_plan *plan = v->plan;
    cli_table *t = cli_doc_table(doc, "levels", "power per level (off-plan verdict for a miss "
                                                "of tolerance + shift)");
    levels_columns(t, v);
    for (size_t k = 0; k < v->layout->n_levels; k++) {
        const sl_layout_level *lv = &v->layout->levels[k];
        cli_table_row(t);
        cli_cell_str(t, plan->factors[lv->factor].name);
        cli_cell_str(t, plan->factors[lv->factor].levels[lv->level]);
        cli_cell_int(t, (long)lv->wafers);
        cli_cell_num(t, lv->effect_se_per_cm2);
        cli_cell_num(t, lv->df);
        cli_cell_num(t, lv->tolerance_per_cm2);
        cli_cell_num(t, lv->shift_per_cm2);
        cli_cell_num(t, lv->power);
        cli_cell_num(t, lv->wafers_per_split_needed == 0 ? NAN
                                                         : (double)lv->wafers_per_split_needed);
        if (v->format == CLI_FORMAT_TABLE)
            cli_cell_str(t, verdict_text(lv->verdict));
        else if (lv->verdict == SL_LAYOUT_UNKNOWN)
            cli_cell_num(t, NAN);
        else
            cli_cell_bool(t, lv->verdict == SL_LAYOUT_ENOUGH);
        if (v->mc) {
            cli_cell_num(t, v->mc->detected[k]);
            cli_cell_num(t, lv->false_rate);
            cli_cell_num(t, v->mc->false_verdict[k]);
        }
    }
}

/* One line per level that is not enough: what would make it so. */
static void suggestion(cli_doc *doc, const sl_plan *plan, const sl_layout_level *lv)
{
    char text[512];
    const char *name = plan->factors[lv->factor].levels[lv->level];
    if (lv->wafers_per_split_needed < 0) {
        snprintf(text, sizeof text,
                 "%s: power %.2f < %.2f even with %d wafers per split (or %d in all): widen T "
                 "or the shift",
                 name, lv->power, plan->resolve.power, SL_LAYOUT_MAX_WAFERS_PER_SPLIT,
                 SL_LAYOUT_MAX_WAFERS);
        cli_doc_note(doc, text);
        return;
    }
    snprintf(text, sizeof text, "%s: power %.2f < %.2f: needs %ld wafers per split%s", name,
             lv->power, plan->resolve.power, lv->wafers_per_split_needed,
             lv->devices_cannot_help ? "; more devices would not do it" : "");
    cli_doc_note(doc, text);
    /* the devices per wafer that suffice once the wafers are there */
    if (lv->devices_per_wafer_enough > 0 && lv->devices_per_wafer_enough < plan->devices_per_wafer) {
        snprintf(text, sizeof text, "%s: with %ld wafers per split, %ld devices per wafer would do",
                 name, lv->wafers_per_split_needed, lv->devices_per_wafer_enough);
        cli_doc_note(doc, text);
    }
}

static void add_notes(cli_doc *doc, const layout_view *v)
{
    const sl_plan *plan = v->plan;
    char text[512];
    if (!plan->variation.present)
        cli_doc_note(doc, "power unknown: the plan has no 'variation' block (wafer and device "
                          "scatter)");
    else if (!plan->resolve.present)
        cli_doc_note(doc, "power unknown: the plan has no 'resolve' block (shift, alpha, power)");
    else {
        snprintf(text, sizeof text,
                 "power: chance that a level off its plan by T + shift is judged off-plan "
                 "(alpha %g, wanted %g);", plan->resolve.alpha, plan->resolve.power);
        cli_doc_note(doc, text);
        cli_doc_note(doc, "T: the level's tolerance; need: wafers per split for that power; "
                          "the unit is the wafer");
        cli_doc_note(doc, "(the load for a level done in loads of a batched step)");
    }
    int unknown = 0;
    for (size_t k = 0; k < v->layout->n_levels; k++) {
        unknown |= v->layout->levels[k].verdict == SL_LAYOUT_UNKNOWN;
        if (v->layout->levels[k].verdict == SL_LAYOUT_TOO_FEW)
            suggestion(doc, plan, &v->layout->levels[k]);
    }
    if (unknown && plan->variation.present && plan->resolve.present)
        cli_doc_note(doc, "power unknown: no wafer-level scatter in 'variation', or more loads "
                          "over several batched steps than the model takes");
    if (v->mc) {
        snprintf(text, sizeof text,
                 "simulated %zu lots: 'seen' are the observed off-plan rates with a miss of",
                 v->mc->lots);
        cli_doc_note(doc, text);
        cli_doc_note(doc, "T + shift (next to power) and as planned (next to the false rate)");
    }
    cli_doc_note(doc, cli_safety_caution);
}

/* Resolution and aliases of a fractional design, said plainly. */
static int fraction_part(cli_doc *doc, const sl_plan *plan)
{
    sl_plan_fraction fr;
    char **aliases = NULL;
    size_t n = 0;
    int main_with_2fi = 0;
    if (plan->n_generators == 0)
        return 0;
    if (sl_plan_fraction_info(&fr, plan) != SL_OK ||
        sl_plan_fraction_aliases(&aliases, &n, &main_with_2fi, plan) != SL_OK)
        return -1;
    cli_doc_num(doc, "resolution", fr.resolution, 3);
    cli_doc_list(doc, "aliases", (const char *const *)aliases, (int)n);
    if (main_with_2fi)
        cli_doc_note(doc, "resolution III: main effects are aliased with two-factor interactions"
                          " (see aliases):\neach such estimate includes that interaction; assume "
                          "it absent or run the other fraction");
    for (size_t i = 0; i < n; i++)
        free(aliases[i]);
    free(aliases);
    return 0;
}

static sl_status simulate_if_asked(sl_layout_mc *mc, const sl_plan *plan, const sl_layout *l,
                                   long lots, long threads, sl_diag *diag)
{
    if (lots <= 0)
        return SL_OK;
    if (!plan->variation.present || !plan->resolve.present) {
        sl_diag_error(diag, "--simulate needs the plan's 'variation' and 'resolve' blocks");
        return SL_EINPUT;
    }
    return sl_layout_simulate_power(mc, plan, l, (size_t)lots, (unsigned long)plan->seed,
                                    (int)threads);
}

static int print_layout(const layout_view *v)
{
    cli_doc *doc = cli_doc_new();
    cli_doc_str(doc, "lot", v->plan->lot);
    cli_doc_num(doc, "seed", (double)v->plan->seed, 20);
    int rc = fraction_part(doc, v->plan) == 0 ? CLI_EXIT_OK : cli_runtime_error("out of memory");
    splits_table(doc, v->plan, v->layout);
    wafers_table(doc, v->plan, v->layout);
    loads_table(doc, v->plan, v->layout);
    levels_table(doc, v);
    add_notes(doc, v);
    if (rc == CLI_EXIT_OK && cli_doc_print(doc, v->format, stdout) != 0)
        rc = cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

static int run_layout(const char *path, cli_format format, long lots, long threads)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_layout *layout = NULL;
    sl_layout_mc mc = { 0 };
    if (!diag)
        return cli_runtime_error("out of memory");
    sl_status st = sl_plan_load(&plan, path, diag);
    if (st == SL_OK)
        st = sl_layout_build(&layout, plan, diag);
    if (st == SL_OK)
        st = simulate_if_asked(&mc, plan, layout, lots, threads, diag);
    int rc = st == SL_OK ? CLI_EXIT_OK : cli_fail(st, diag);
    if (st == SL_OK) {
        cli_print_diag(diag); /* the plan's warnings */
        layout_view v = { plan, layout, lots > 0 ? &mc : NULL, format };
        rc = print_layout(&v);
    }
    sl_layout_mc_free(&mc);
    sl_layout_free(layout);
    sl_plan_free(plan);
    sl_diag_free(diag);
    return rc;
}

int cmd_layout(int argc, char **argv)
{
    cli_format format = CLI_FORMAT_TABLE;
    long lots = 0, threads = 2;
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == OPT_HELP)
            return cli_print_help(usage);
        if (opt == OPT_SIMULATE && cli_parse_long("--simulate", optarg, 1, &lots) != 0)
            return CLI_EXIT_USAGE;
        if (opt == OPT_THREADS && cli_parse_long("--threads", optarg, 1, &threads) != 0)
            return CLI_EXIT_USAGE;
        if (opt == OPT_FORMAT && cli_format_parse(optarg, &format) != 0)
            return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
        if (opt != OPT_FORMAT && opt != OPT_SIMULATE && opt != OPT_THREADS)
            return cli_bad_option("layout", argv[optind - 1]);
    }
    if (optind + 1 != argc)
        return cli_usage_error("layout: give exactly one plan file (see 'splitlot layout --help')");
    if (threads > 64)
        return cli_usage_error("--threads: at most 64, got %ld", threads);
    return run_layout(argv[optind], format, lots, threads);
}
