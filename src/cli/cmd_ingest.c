/* SPDX-License-Identifier: MIT
 * `splitlot ingest`: import a lot's device results or raw transfer sweeps
 * (fitted per device) in one transaction, with a progress line on a terminal
 * and an import summary on stdout.
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "splitlot/ingest.h"

static const char usage[] =
    "usage: splitlot ingest --lot ID (--results FILE | --sweeps FILE) [options]\n\n"
    "Import measurements of a lot whose plan was stored by 'splitlot predict'.\n"
    "Results: one row per device (wafer,device,die_x,die_y,v_cnp_V[,mobility_cm2_per_Vs,\n"
    "n0_per_cm2,r_contact_ohm,hysteresis_V,temperature_K]). Sweeps: one row per point\n"
    "(wafer,device,die_x,die_y,vg_V and r_ohm or id_A with vd_V[,temperature_K,\n"
    "direction,compliance]); each device's transfer curve is fitted, one temperature\n"
    "at a time, a double sweep branch by branch. Columns may carry their unit\n"
    "(\"Vg [V]\", \"Id (uA)\", \"R [kOhm]\"); the separator (comma, semicolon, tab) is\n"
    "found from the header. FILE '-' reads standard input.\n"
    "Each import is a measurement run per temperature; a device measured again at\n"
    "the same step and temperature (a re-probe) supersedes its earlier measurement,\n"
    "which stays stored. Nothing is kept of an import with problems, unless\n"
    "--keep-going.\n\n"
    "  --lot ID                  the lot\n"
    "  --results FILE            device results CSV\n"
    "  --sweeps FILE             transfer sweeps CSV\n"
    "  --step NAME               process step measured after (default final)\n"
    "  --temperature-K T         temperature of rows without a temperature_K value\n"
    "                            (one of the plan's; default the plan's first)\n"
    "  --columns Q=COL[,...]     read quantity Q (vg_V, id_uA, ...) from column COL\n"
    "  --keep-going              store the good devices of a file with problems\n"
    "  --rejects FILE            with --keep-going: the rejected devices' rows and why\n"
    "  --threads N               fitting threads (default: the machine's cores)\n"
    "  --model symmetric|two-mobility\n"
    "                            transfer-curve model for sweeps: one mobility, or\n"
    "                            electrons and holes each their own (default symmetric)\n"
    "  --density-model qc|short  carrier density of the gate for sweeps: the charge\n"
    "                            balance with quantum capacitance at the device's\n"
    "                            temperature (default qc), or C_g (V_g - V_cnp)/e\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --format table|csv|json   summary format (default table)\n"
    "  --help                    this text\n";

enum { OPT_LOT = 1, OPT_RESULTS, OPT_SWEEPS, OPT_REPLACE, OPT_STEP, OPT_TEMPERATURE, OPT_THREADS,
       OPT_MODEL, OPT_DENSITY, OPT_DB, OPT_FORMAT, OPT_HELP, OPT_COLUMNS, OPT_KEEP_GOING,
       OPT_REJECTS };

static const struct option options[] = {
    { "lot", required_argument, NULL, OPT_LOT },
    { "results", required_argument, NULL, OPT_RESULTS },
    { "sweeps", required_argument, NULL, OPT_SWEEPS },
    { "replace", no_argument, NULL, OPT_REPLACE }, /* gone: says what took its place */
    { "step", required_argument, NULL, OPT_STEP },
    { "temperature-K", required_argument, NULL, OPT_TEMPERATURE },
    { "threads", required_argument, NULL, OPT_THREADS },
    { "model", required_argument, NULL, OPT_MODEL },
    { "density-model", required_argument, NULL, OPT_DENSITY },
    { "db", required_argument, NULL, OPT_DB },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { "columns", required_argument, NULL, OPT_COLUMNS },
    { "keep-going", no_argument, NULL, OPT_KEEP_GOING },
    { "rejects", required_argument, NULL, OPT_REJECTS },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    sl_ingest_options opt;
    const char *db;
    cli_format format;
    int n_sources;
} ingest_args;

/* Shown only once an import has run for 2 s: short ones stay quiet. */
static void progress_line(const sl_ingest_progress *p, void *ctx)
{
    int *shown = ctx;
    if (p->seconds < 2.0)
        return;
    *shown = 1;
    double rate = p->seconds > 0 ? (double)p->rows / p->seconds : 0.0;
    fprintf(stderr, "\r%ld rows, %ld devices, %.0f rows/s, %.1f s   ", p->rows, p->devices, rate,
            p->seconds);
    fflush(stderr);
}

static int parse_args(ingest_args *a, int argc, char **argv)
{
    int opt;
    long threads;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: cli_print_help(usage); return -1;
        case OPT_LOT: a->opt.lot = optarg; break;
        case OPT_RESULTS: a->opt.kind = SL_INGEST_RESULTS; a->opt.path = optarg; a->n_sources++; break;
        case OPT_SWEEPS: a->opt.kind = SL_INGEST_SWEEPS; a->opt.path = optarg; a->n_sources++; break;
        case OPT_REPLACE:
            return cli_usage_error("ingest: --replace is gone: each import is a measurement run "
                                   "of its own, and a device measured again at the same --step and "
                                   "--temperature-K supersedes its earlier measurement (which stays "
                                   "listed); import the file without --replace");
        case OPT_STEP:
            if (cli_check_step(optarg) != 0)
                return CLI_EXIT_USAGE;
            a->opt.step = optarg;
            break;
        case OPT_TEMPERATURE:
            if (cli_parse_temperature(optarg, &a->opt.temperature_K) != 0)
                return CLI_EXIT_USAGE;
            break;
        case OPT_DB: a->db = optarg; break;
        case OPT_COLUMNS: a->opt.columns = optarg; break;
        case OPT_KEEP_GOING: a->opt.keep_going = 1; break;
        case OPT_REJECTS: a->opt.rejects_path = optarg; break;
        case OPT_THREADS:
            if (cli_parse_long("--threads", optarg, 1, &threads) != 0)
                return CLI_EXIT_USAGE;
            a->opt.threads = (int)(threads > 64 ? 64 : threads);
            break;
        case OPT_MODEL:
            if (strcmp(optarg, "symmetric") == 0)
                a->opt.fit_model = SL_FIT_MODEL_SYMMETRIC;
            else if (strcmp(optarg, "two-mobility") == 0)
                a->opt.fit_model = SL_FIT_MODEL_TWO_MOBILITY;
            else
                return cli_usage_error("--model: '%s' is not one of symmetric, two-mobility", optarg);
            break;
        case OPT_DENSITY:
            if (strcmp(optarg, "qc") == 0)
                a->opt.density_model = SL_FIT_DENSITY_CHARGE_BALANCE;
            else if (strcmp(optarg, "short") == 0)
                a->opt.density_model = SL_FIT_DENSITY_SHORT;
            else
                return cli_usage_error("--density-model: '%s' is not one of qc, short", optarg);
            break;
        case OPT_FORMAT:
            if (cli_format_parse(optarg, &a->format) != 0)
                return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
            break;
        default: return cli_bad_option("ingest", argv[optind - 1]);
        }
    }
    if (optind < argc)
        return cli_usage_error("ingest: unexpected argument '%s'", argv[optind]);
    if (!a->opt.lot)
        return cli_usage_error("ingest: --lot is required (see 'splitlot ingest --help')");
    if (a->n_sources != 1)
        return cli_usage_error("ingest: give exactly one of --results FILE or --sweeps FILE");
    if (a->opt.rejects_path && !a->opt.keep_going)
        return cli_usage_error("ingest: --rejects FILE goes with --keep-going");
    return 0;
}

static int print_summary(const ingest_args *a, const sl_ingest_summary *s)
{
    cli_doc *doc = cli_doc_new();
    cli_doc_str(doc, "lot", a->opt.lot);
    cli_doc_str(doc, "source", a->opt.path);
    cli_doc_num(doc, "rows", (double)s->rows, 15);
    cli_doc_num(doc, "devices", (double)s->devices, 15);
    cli_doc_num(doc, "measurements", (double)s->measurements, 15);
    cli_doc_str(doc, "step", a->opt.step ? a->opt.step : "final");
    cli_doc_str(doc, "source_sha256", s->sha256);
    char sep[2] = { s->separator ? s->separator : ',', '\0' };
    cli_doc_str(doc, "separator", sep[0] == '\t' ? "tab" : sep);
    cli_doc_str(doc, "unused_columns", s->unused_columns);
    if (a->opt.kind == SL_INGEST_SWEEPS) {
        cli_doc_num(doc, "double_sweeps", (double)s->double_sweeps, 15);
        cli_doc_num(doc, "hysteresis_above_plan", (double)s->hysteresis_flagged, 15);
        cli_doc_num(doc, "points_dropped_overflow", (double)s->points_overflow, 15);
        cli_doc_num(doc, "devices_with_overflow", (double)s->devices_with_overflow, 15);
        cli_doc_num(doc, "points_dropped_compliance", (double)s->points_compliance, 15);
    }
    if (a->opt.keep_going) {
        cli_doc_num(doc, "devices_rejected", (double)s->rejected_devices, 15);
        cli_doc_num(doc, "rows_rejected", (double)s->rejected_rows, 15);
        cli_doc_num(doc, "problems", (double)s->errors, 15);
    }
    cli_doc_num(doc, "seconds", s->seconds, 3);
    cli_doc_num(doc, "rows_per_second", s->seconds > 0 ? (double)s->rows / s->seconds : 0.0, 4);
    cli_table *r = cli_doc_table(doc, "runs", "measurement runs");
    cli_table_col_int(r, "run", "run");
    cli_table_col_num(r, "temperature_K", "T [K]", 6);
    cli_table_col_int(r, "rows", "rows");
    cli_table_col_int(r, "devices", "devices");
    for (size_t i = 0; i < s->n_runs; i++) {
        cli_table_row(r);
        cli_cell_int(r, s->runs[i].run);
        cli_cell_num(r, s->runs[i].temperature_K);
        cli_cell_int(r, s->runs[i].rows);
        cli_cell_int(r, s->runs[i].devices);
    }
    cli_table *t = cli_doc_table(doc, "classes", "measurements by extraction class");
    cli_table_col_str(t, "class", "class");
    cli_table_col_int(t, "devices", "devices");
    if (a->opt.kind == SL_INGEST_SWEEPS) {
        for (int k = 0; k < SL_FIT_CLASS_COUNT; k++) {
            cli_table_row(t);
            cli_cell_str(t, sl_fit_class_name((sl_fit_class)k));
            cli_cell_int(t, s->per_class[k]);
        }
    } else {
        cli_table_row(t);
        cli_cell_str(t, "measured");
        cli_cell_int(t, s->measurements - s->unmeasured);
        cli_table_row(t);
        cli_cell_str(t, "unmeasured");
        cli_cell_int(t, s->unmeasured);
    }
    int rc = cli_doc_print(doc, a->format, stdout) == 0 ? CLI_EXIT_OK
                                                      : cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

int cmd_ingest(int argc, char **argv)
{
    ingest_args a = { .format = CLI_FORMAT_TABLE, .opt.temperature_K = NAN };
    long cores = sysconf(_SC_NPROCESSORS_ONLN);
    a.opt.threads = cores > 0 ? (int)(cores > 64 ? 64 : cores) : 1;
    int rc = parse_args(&a, argc, argv);
    if (rc != 0)
        return rc < 0 ? CLI_EXIT_OK : rc;
    int progress_shown = 0;
    if (isatty(STDERR_FILENO)) {
        a.opt.progress = progress_line;
        a.opt.progress_ctx = &progress_shown;
    }
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_ingest_summary summary;
    const char *db = cli_db_path(a.db);
    if (cli_require_db(db) != 0) {
        sl_diag_free(diag);
        return CLI_EXIT_USAGE;
    }
    sl_status st = sl_store_open(&store, db, diag);
    if (st == SL_OK)
        st = sl_ingest_run(&summary, store, &a.opt, diag);
    if (progress_shown)
        fputs("\n", stderr);
    if (st == SL_OK)
        cli_print_diag(diag); /* --keep-going: the problems of the devices left out */
    rc = st == SL_OK ? print_summary(&a, &summary) : cli_fail(st, diag);
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}
