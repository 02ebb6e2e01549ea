/* SPDX-License-Identifier: MIT
 * `splitlot predict PLAN`: per split and temperature predictions from the
 * plan, printed as table, CSV or JSON and stored (plan text, layout,
 * predictions) as a revision of the lot in one transaction.
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/predict.h"
#include "splitlot/store.h"

static const char usage[] =
    "usage: splitlot predict PLAN [--db FILE] [--format table|csv|json]\n\n"
    "Predict, per split and temperature, the gate capacitance, the planned doping,\n"
    "the neutrality voltage with its uncertainty, the safe gate range with the\n"
    "densities reachable inside it, and the thermal floor; store the plan, its\n"
    "layout and the predictions as a revision of the lot (an unchanged plan\n"
    "changes nothing).\n\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_DB = 1, OPT_FORMAT, OPT_HELP };

static const struct option options[] = {
    { "db", required_argument, NULL, OPT_DB },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    sl_plan *plan;
    sl_layout *layout;
    sl_prediction *pred;
    size_t n_pred;
} predict_run;

/* The flat splits[] of docs/formats.md: one row per split and temperature. */
static void machine_table(cli_doc *doc, const predict_run *r)
{
    cli_table *t = cli_doc_table(doc, "splits", "predictions");
    cli_table_col_str(t, "split", "split");
    cli_table_col_str(t, "dielectric", "dielectric");
    cli_table_col_list(t, "treatments", "treatments");
    cli_table_col_num(t, "temperature_K", "T", 6);
    cli_table_col_num(t, "gate_capacitance_nF_per_cm2", "Cg", 6);
    cli_table_col_num(t, "eot_nm", "EOT", 6);
    cli_table_col_num(t, "doping_per_cm2", "N", 6);
    cli_table_col_num(t, "doping_sigma_per_cm2", "sN", 6);
    cli_table_col_num(t, "cnp_V", "Vcnp", 6);
    cli_table_col_num(t, "cnp_sigma_V", "sVcnp", 6);
    cli_table_col_range(t, "gate_range_V", "gate", 6);
    cli_table_col_num(t, "max_electron_density_per_cm2", "nmax", 6);
    cli_table_col_num(t, "max_hole_density_per_cm2", "pmax", 6);
    cli_table_col_range(t, "fermi_level_at_gate_range_eV", "EF", 6);
    cli_table_col_num(t, "gate_efficiency_per_cm2_V", "eff", 6);
    cli_table_col_num(t, "thermal_floor_per_cm2", "nth", 6);
    cli_table_col_num(t, "thermal_floor_V", "nthV", 6);
    cli_table_col_num(t, "disorder_crossover_K", "Tstar", 6);
    cli_table_col_bool(t, "cnp_in_range", "in");
    const char *names[64];
    for (size_t i = 0; i < r->n_pred; i++) {
        const sl_prediction *p = &r->pred[i];
        cli_table_row(t);
        cli_cell_str(t, r->plan->splits[p->split].name);
        cli_cell_str(t, r->plan->dielectrics[r->plan->splits[p->split].dielectric].name);
        cli_cell_list(t, names, cli_split_treatment_names(r->plan, p->split, names, 64));
        cli_cell_num(t, p->temperature_K);
        cli_cell_num(t, p->gate_capacitance_F_per_m2 * SL_NF_CM2_PER_F_M2);
        cli_cell_num(t, p->eot_nm);
        cli_cell_num(t, p->doping_per_cm2.val);
        cli_cell_num(t, p->doping_per_cm2.sigma);
        cli_cell_num(t, p->cnp_V.val);
        cli_cell_num(t, p->cnp_V.sigma);
        cli_cell_range(t, p->gate_min_V, p->gate_max_V);
        cli_cell_num(t, p->max_electron_density_per_cm2);
        cli_cell_num(t, p->max_hole_density_per_cm2);
        cli_cell_range(t, p->fermi_at_gate_min_eV, p->fermi_at_gate_max_eV);
        cli_cell_num(t, p->gate_efficiency_per_cm2_V);
        cli_cell_num(t, p->thermal_floor_per_cm2);
        cli_cell_num(t, p->thermal_floor_V);
        cli_cell_num(t, p->disorder_crossover_K);
        cli_cell_bool(t, p->cnp_in_range);
    }
}

/* Terminal form, within 100 columns: one table per split (stack, doping,
 * neutrality point) and one per split and temperature (the density window). */
static void split_table(cli_doc *doc, const predict_run *r)
{
    cli_table *t = cli_doc_table(doc, "splits", "splits (neutrality point from planned doping)");
    cli_table_col_str(t, "split", "split");
    cli_table_col_fixed(t, "c", "Cg nF/cm2", 2);
    cli_table_col_fixed(t, "n", "N 1e12/cm2", 2);
    cli_table_col_fixed(t, "ns", "+/-", 2);
    cli_table_col_fixed(t, "v", "Vcnp V", 2);
    cli_table_col_fixed(t, "vs", "+/-", 2);
    cli_table_col_range(t, "g", "gate V", 4);
    cli_table_col_bool(t, "in", "inside");
    size_t nt = r->plan->n_temperatures;
    for (size_t s = 0; s < r->plan->n_splits; s++) {
        const sl_prediction *p = &r->pred[s * nt];
        cli_table_row(t);
        cli_cell_str(t, r->plan->splits[s].name);
        cli_cell_num(t, p->gate_capacitance_F_per_m2 * SL_NF_CM2_PER_F_M2);
        cli_cell_num(t, p->doping_per_cm2.val * 1e-12);
        cli_cell_num(t, p->doping_per_cm2.sigma * 1e-12);
        cli_cell_num(t, p->cnp_V.val);
        cli_cell_num(t, p->cnp_V.sigma);
        cli_cell_range(t, p->gate_min_V, p->gate_max_V);
        cli_cell_bool(t, p->cnp_in_range);
    }
}

static void window_table(cli_doc *doc, const predict_run *r)
{
    cli_table *t = cli_doc_table(doc, "window", "density window inside the gate range");
    cli_table_col_str(t, "split", "split");
    cli_table_col_num(t, "t", "T K", 4);
    cli_table_col_fixed(t, "n", "nmax e12/cm2", 2);
    cli_table_col_fixed(t, "p", "pmax e12/cm2", 2);
    cli_table_col_range(t, "ef", "EF eV", 3);
    cli_table_col_fixed(t, "th", "nth e10/cm2", 3);
    cli_table_col_fixed(t, "tv", "nth V", 3);
    for (size_t i = 0; i < r->n_pred; i++) {
        const sl_prediction *p = &r->pred[i];
        cli_table_row(t);
        cli_cell_str(t, r->plan->splits[p->split].name);
        cli_cell_num(t, p->temperature_K);
        cli_cell_num(t, p->max_electron_density_per_cm2 * 1e-12);
        cli_cell_num(t, p->max_hole_density_per_cm2 * 1e-12);
        cli_cell_range(t, p->fermi_at_gate_min_eV, p->fermi_at_gate_max_eV);
        cli_cell_num(t, p->thermal_floor_per_cm2 * 1e-10);
        cli_cell_num(t, p->thermal_floor_V);
    }
}

static int print_predictions(const predict_run *r, cli_format format)
{
    cli_doc *doc = cli_doc_new();
    cli_doc_str(doc, "lot", r->plan->lot);
    if (format == CLI_FORMAT_TABLE) {
        split_table(doc, r);
        window_table(doc, r);
        char note[256];
        double t_star = r->n_pred ? r->pred[0].disorder_crossover_K : 0.0;
        if (t_star > 0.0)
            snprintf(note, sizeof note, "nth: thermal floor (nth V: the same in gate volts); "
                     "disorder crossover temperature T* = %.1f K.", t_star);
        else
            snprintf(note, sizeof note, "nth: thermal floor (nth V: the same in gate volts); "
                     "no disorder density in the plan, so no crossover temperature.");
        cli_doc_note(doc, note);
        cli_doc_note(doc, cli_safety_caution);
    } else {
        machine_table(doc, r);
    }
    int rc = cli_doc_print(doc, format, stdout) == 0 ? CLI_EXIT_OK
                                                     : cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

static sl_status store_run(const predict_run *r, const char *db_path, sl_diag *diag)
{
    sl_store *store = NULL;
    int revision = 0, created = 0;
    sl_status st = sl_store_open(&store, db_path, diag);
    if (st == SL_OK)
        st = sl_store_begin(store, diag);
    if (st == SL_OK)
        st = sl_store_save_plan(store, &revision, &created, r->plan, r->layout, r->pred,
                                r->n_pred, diag);
    if (st == SL_OK)
        st = sl_store_commit(store, diag);
    else if (store)
        sl_store_rollback(store);
    sl_store_close(store);
    if (st == SL_OK)
        fprintf(stderr, "splitlot: lot %s: %s revision %d in %s\n", r->plan->lot,
                created ? "stored plan as" : "plan unchanged, still", revision, db_path);
    return st;
}

static int run_predict(const char *path, const char *db_path, cli_format format)
{
    sl_diag *diag = sl_diag_new();
    predict_run r = { 0 };
    sl_status st = sl_plan_load(&r.plan, path, diag);
    if (st == SL_OK)
        st = sl_layout_build(&r.layout, r.plan, diag);
    if (st == SL_OK)
        st = sl_predict_plan(&r.pred, &r.n_pred, r.plan, diag);
    int rc;
    if (st != SL_OK) {
        rc = cli_fail(st, diag);
    } else {
        cli_print_diag(diag); /* the plan's warnings */
        sl_diag_clear(diag);
        st = store_run(&r, db_path, diag);
        rc = st == SL_OK ? print_predictions(&r, format) : cli_fail(st, diag);
    }
    free(r.pred);
    sl_layout_free(r.layout);
    sl_plan_free(r.plan);
    sl_diag_free(diag);
    return rc;
}

int cmd_predict(int argc, char **argv)
{
    cli_format format = CLI_FORMAT_TABLE;
    const char *db = NULL;
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == OPT_HELP)
            return cli_print_help(usage);
        if (opt == OPT_DB)
            db = optarg;
        else if (opt == OPT_FORMAT && cli_format_parse(optarg, &format) != 0)
            return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
        else if (opt != OPT_FORMAT)
            return cli_bad_option("predict", argv[optind - 1]);
    }
    if (optind + 1 != argc)
        return cli_usage_error("predict: give exactly one plan file (see 'splitlot predict --help')");
    return run_predict(argv[optind], cli_db_path(db), format);
}
