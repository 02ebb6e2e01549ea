/* SPDX-License-Identifier: MIT
 * `splitlot history`: every level's estimate per lot in time order, the
 * random-effects pooled value with the between-lot sigma, the limits each
 * lot was judged against and drift flags; --emit-yaml prints the calibrated
 * dopings and measured scatter as plan YAML for the next lot.
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdlib.h>

#include "splitlot/analyze.h"

static const char usage[] =
    "usage: splitlot history [--db FILE] [--format table|csv|json] [--emit-yaml]\n\n"
    "For every dielectric and treatment level: its estimated doping in each lot\n"
    "(creation order), the random-effects pooled value (DerSimonian and Laird)\n"
    "with its SE and the between-lot sigma tau, and from the second lot on a\n"
    "drift flag for a lot outside centre +/- 3 sqrt(tau^2 + SE^2) of the lots\n"
    "before it.\n\n"
    "  --emit-yaml               print calibrated doping (sigma sqrt(tau^2 + SE^2))\n"
    "                            and the measured variation as plan YAML instead\n"
    "  --step NAME               each lot's measurements after this process step\n"
    "                            (default: the step of the lot's newest run)\n"
    "  --temperature-K T         each lot's measurements at this temperature (default:\n"
    "                            its plan's first with measurements; lots whose plan\n"
    "                            lacks it are left out)\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_DB = 1, OPT_FORMAT, OPT_YAML, OPT_STEP, OPT_TEMPERATURE, OPT_HELP };

static const struct option options[] = {
    { "db", required_argument, NULL, OPT_DB },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "emit-yaml", no_argument, NULL, OPT_YAML },
    { "step", required_argument, NULL, OPT_STEP },
    { "temperature-K", required_argument, NULL, OPT_TEMPERATURE },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

static void levels_table(cli_doc *doc, const sl_history *h)
{
    cli_table *t = cli_doc_table(doc, "levels", "levels across lots (doping, cm^-2)");
    cli_table_col_str(t, "factor", "factor");
    cli_table_col_str(t, "level", "level");
    cli_table_col_str(t, "reference", "vs");
    cli_table_col_int(t, "lots", "lots");
    cli_table_col_num(t, "planned_per_cm2", "planned", 3);
    cli_table_col_num(t, "pooled_per_cm2", "pooled", 3);
    cli_table_col_num(t, "pooled_se_per_cm2", "SE", 2);
    cli_table_col_num(t, "between_lot_sigma_per_cm2", "tau", 2);
    cli_table_col_num(t, "center_per_cm2", "centre", 3);
    cli_table_col_range(t, "limits_per_cm2", "limits", 3);
    cli_table_col_int(t, "drift_lots", "drift");
    for (size_t i = 0; i < h->n_levels; i++) {
        const sl_history_level *l = &h->levels[i];
        cli_table_row(t);
        cli_cell_str(t, l->factor);
        cli_cell_str(t, l->level);
        cli_cell_str(t, l->is_intercept ? "-" : l->reference);
        cli_cell_int(t, (long)l->n_points);
        cli_cell_num(t, l->planned_per_cm2);
        cli_cell_num(t, l->pooled.value);
        cli_cell_num(t, l->pooled.se);
        cli_cell_num(t, l->pooled.tau);
        cli_cell_num(t, l->chart.center);
        cli_cell_range(t, l->chart.lcl, l->chart.ucl);
        cli_cell_int(t, (long)l->n_drift);
    }
}

static void points_table(cli_doc *doc, const sl_history *h)
{
    cli_table *t = cli_doc_table(doc, "estimates", "estimates per lot (doping, cm^-2)");
    cli_table_col_str(t, "factor", "factor");
    cli_table_col_str(t, "level", "level");
    cli_table_col_str(t, "lot", "lot");
    cli_table_col_str(t, "created_utc", "created");
    cli_table_col_num(t, "estimated_per_cm2", "estimated", 3);
    cli_table_col_num(t, "stderr_per_cm2", "SE", 2);
    cli_table_col_range(t, "limits_per_cm2", "limits", 3);
    cli_table_col_list(t, "flags", "flags");
    for (size_t i = 0; i < h->n_levels; i++)
        for (size_t k = 0; k < h->levels[i].n_points; k++) {
            const sl_history_point *p = &h->levels[i].points[k];
            const char *drift = "drift";
            cli_table_row(t);
            cli_cell_str(t, h->levels[i].factor);
            cli_cell_str(t, h->levels[i].level);
            cli_cell_str(t, p->lot);
            cli_cell_str(t, p->created_utc);
            cli_cell_num(t, p->estimated_per_cm2);
            cli_cell_num(t, p->stderr_per_cm2);
            cli_cell_range(t, p->lcl_per_cm2, p->ucl_per_cm2);
            cli_cell_list(t, &drift, p->drift ? 1 : 0);
        }
}

static int print_history(const sl_history *h, cli_format format, int emit_yaml,
                         const sl_analyze_view *view)
{
    if (emit_yaml) {
        char *yaml = NULL;
        sl_status st = sl_history_emit_yaml(&yaml, h);
        if (st == SL_ENOTFOUND)
            return cli_usage_error("history: the database holds no lot to calibrate from");
        if (st != SL_OK)
            return cli_runtime_error("history: %s", sl_status_str(st));
        fputs(yaml, stdout);
        free(yaml);
        return fflush(stdout) == 0 ? CLI_EXIT_OK : cli_runtime_error("cannot write output");
    }
    cli_doc *doc = cli_doc_new();
    cli_doc_num(doc, "lots", (double)h->n_lot_names, 15);
    cli_doc_num(doc, "lots_with_estimates", (double)h->n_lots, 15);
    cli_doc_num(doc, "wafer_sigma_per_cm2", h->wafer_sigma_per_cm2, 3);
    cli_doc_num(doc, "device_sigma_V", h->device_sigma_V, 3);
    if (h->n_batch_sigma)
        cli_doc_num(doc, "batch_sigma_per_cm2", h->batch_sigma_per_cm2, 3);
    /* the view each lot was read in: as asked, else ("" and null) each
     * lot's own default, the newest step and the first temperature with data */
    cli_doc_str(doc, "step", view->step ? view->step : "");
    cli_doc_num(doc, "temperature_K", view->temperature_K, 6);
    if (!view->step || isnan(view->temperature_K))
        cli_doc_note(doc, "each lot read at its newest step and its plan's first temperature "
                          "with measurements, where not given");
    levels_table(doc, h);
    points_table(doc, h);
    cli_doc_note(doc, "pooled: random effects (DerSimonian and Laird, 1986) over the lots in "
                      "control; tau: the between-lot sigma (none from one lot). Each lot from the "
                      "second on is judged against the lots before it: centre +/- 3 sqrt(tau^2 + "
                      "SE_lot^2 + SE_centre^2); outside is drift. The levels table shows the "
                      "limits for a lot of the median SE.");
    int rc = cli_doc_print(doc, format, stdout) == 0 ? CLI_EXIT_OK
                                                     : cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

int cmd_history(int argc, char **argv)
{
    cli_format format = CLI_FORMAT_TABLE;
    const char *db = NULL;
    int emit_yaml = 0, opt;
    sl_analyze_view view = { NULL, NAN };
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: return cli_print_help(usage);
        case OPT_DB: db = optarg; break;
        case OPT_YAML: emit_yaml = 1; break;
        case OPT_STEP:
            if (cli_check_step(optarg) != 0)
                return CLI_EXIT_USAGE;
            view.step = optarg;
            break;
        case OPT_TEMPERATURE:
            if (cli_parse_temperature(optarg, &view.temperature_K) != 0)
                return CLI_EXIT_USAGE;
            break;
        case OPT_FORMAT:
            if (cli_format_parse(optarg, &format) != 0)
                return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
            break;
        default: return cli_bad_option("history", argv[optind - 1]);
        }
    }
    if (optind < argc)
        return cli_usage_error("history: unexpected argument '%s'", argv[optind]);
    db = cli_db_path(db);
    if (cli_require_db(db) != 0)
        return CLI_EXIT_USAGE;
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_history *h = NULL;
    sl_status st = sl_store_open(&store, db, diag);
    if (st == SL_OK) {
        cli_busy *busy = cli_busy_start("history");
        st = sl_analyze_history_view(&h, store, &view, diag);
        cli_busy_stop(busy);
    }
    int rc = st == SL_OK ? print_history(h, format, emit_yaml, &view) : cli_fail(st, diag);
    sl_history_free(h);
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}
