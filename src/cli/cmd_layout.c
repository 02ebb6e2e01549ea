/* SPDX-License-Identifier: MIT
 * `splitlot layout PLAN`: the splits with their wafers and the devices needed
 * against those available, and every wafer with its split and processing
 * order, as a table, CSV or JSON (keys of docs/formats.md).
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"

static const char usage[] =
    "usage: splitlot layout PLAN [--format table|csv|json]\n\n"
    "Assign the plan's wafers to its splits and order their processing, both\n"
    "randomised from the plan's seed (the same seed gives the same layout), and\n"
    "compare the devices each split needs to resolve the plan's shift with the\n"
    "devices it will have (wafers x devices per wafer x expected yield).\n\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_FORMAT = 1, OPT_HELP };

static const struct option options[] = {
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

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
    cli_table_col_int(t, "devices_needed", "needed");
    cli_table_col_fixed(t, "devices_available", "available", 1);
    cli_table_col_bool(t, "enough_devices", "enough");
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
        cli_cell_int(t, (long)sp->devices_needed);
        cli_cell_num(t, sp->devices_available);
        if (sp->verdict == SL_LAYOUT_NOT_ASKED)
            cli_cell_num(t, NAN); /* null in JSON, empty in a table */
        else
            cli_cell_bool(t, sp->verdict == SL_LAYOUT_ENOUGH);
    }
    free(names);
}

static void wafers_table(cli_doc *doc, const sl_plan *plan, const sl_layout *l)
{
    cli_table *t = cli_doc_table(doc, "wafers", "wafers");
    cli_table_col_str(t, "wafer", "wafer");
    split_columns(t);
    cli_table_col_int(t, "process_order", "order");
    const char **names = calloc(plan->n_treatments + 1, sizeof *names);
    if (!names)
        return;
    for (size_t i = 0; i < l->n_wafers; i++) {
        const sl_layout_wafer *w = &l->wafers[i];
        cli_table_row(t);
        cli_cell_str(t, w->wafer);
        if (w->split < 0) {
            cli_cell_str(t, "spare");
            cli_cell_str(t, "");
            cli_cell_list(t, names, 0);
            cli_cell_num(t, NAN);
            continue;
        }
        split_cells(t, plan, (size_t)w->split, names);
        cli_cell_int(t, (long)w->process_order);
    }
    free(names);
}

static void add_notes(cli_doc *doc, const sl_plan *plan, const sl_layout *l)
{
    char text[512];
    const sl_plan_resolve *r = &plan->resolve;
    if (!r->present)
        snprintf(text, sizeof text, "devices needed: not asked (the plan has no resolve block)");
    else
        snprintf(text, sizeof text,
                 "per split: %zu devices needed to see %g V at %g V device sigma "
                 "(alpha %g, power %g)",
                 l->n_splits ? l->splits[0].devices_needed : (size_t)0, r->shift_V,
                 r->device_sigma_V, r->alpha, r->power);
    cli_doc_note(doc, text);
    cli_doc_note(doc, cli_safety_caution);
}

static int run_layout(const char *path, cli_format format)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_layout *layout = NULL;
    if (!diag)
        return cli_runtime_error("out of memory");
    sl_status st = sl_plan_load(&plan, path, diag);
    if (st == SL_OK)
        st = sl_layout_build(&layout, plan, diag);
    int rc = st == SL_OK ? CLI_EXIT_OK : cli_fail(st, diag);
    if (st == SL_OK) {
        cli_print_diag(diag); /* the plan's warnings */
        cli_doc *doc = cli_doc_new();
        cli_doc_str(doc, "lot", plan->lot);
        cli_doc_num(doc, "seed", (double)plan->seed, 20);
        splits_table(doc, plan, layout);
        wafers_table(doc, plan, layout);
        add_notes(doc, plan, layout);
        if (cli_doc_print(doc, format, stdout) != 0)
            rc = cli_runtime_error("cannot write output");
        cli_doc_free(doc);
    }
    sl_layout_free(layout);
    sl_plan_free(plan);
    sl_diag_free(diag);
    return rc;
}

int cmd_layout(int argc, char **argv)
{
    cli_format format = CLI_FORMAT_TABLE;
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == OPT_HELP)
            return cli_print_help(usage);
        if (opt != OPT_FORMAT)
            return cli_bad_option("layout", argv[optind - 1]);
        if (cli_format_parse(optarg, &format) != 0)
            return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
    }
    if (optind + 1 != argc)
        return cli_usage_error("layout: give exactly one plan file (see 'splitlot layout --help')");
    return run_layout(argv[optind], format);
}
