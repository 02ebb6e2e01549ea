/* SPDX-License-Identifier: MIT
 * `splitlot compare --lot ID`: every device against its prediction with its
 * flags, split summaries, level effects against the plan, the ANOVA across
 * splits, and the failure-analysis list; exit 3 on flags with --fail-on-flags.
 * The devices and the failure-analysis list are streamed from the analysis
 * to the output row by row, so memory does not grow with the lot.
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "splitlot/analyze.h"

static const char usage[] =
    "usage: splitlot compare --lot ID [options]\n\n"
    "Compare every measured device of a lot with its split's prediction: deviation,\n"
    "z against the prediction interval, flags (outlier: modified z of the residual\n"
    "from its wafer's median beyond 3.5; off-prediction: outside the 99.7 %\n"
    "interval; extraction failures). Then, with the wafer as the unit: split\n"
    "summaries and intervals from wafer means, each level's estimated doping with\n"
    "its 95 % interval and verdict against the plan's tolerance (as-planned,\n"
    "differs, off-plan, inconclusive), a one-way ANOVA of wafer means across\n"
    "splits; and the flagged devices for failure analysis, most severe first.\n\n"
    "  --lot ID                  the lot\n"
    "  --step NAME               measurements after this process step (default: the\n"
    "                            step of the lot's newest measurement run)\n"
    "  --temperature-K T         measurements at this plan temperature (default: the\n"
    "                            plan's first temperature with measurements)\n"
    "  --only-flagged            devices: only the flagged ones\n"
    "  --fail-on-flags           exit 3 when a device is flagged or a level is\n"
    "                            off-plan or differs\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_LOT = 1, OPT_STEP, OPT_TEMPERATURE, OPT_ONLY_FLAGGED, OPT_FAIL, OPT_DB, OPT_FORMAT,
       OPT_HELP };

static const struct option options[] = {
    { "lot", required_argument, NULL, OPT_LOT },
    { "step", required_argument, NULL, OPT_STEP },
    { "temperature-K", required_argument, NULL, OPT_TEMPERATURE },
    { "only-flagged", no_argument, NULL, OPT_ONLY_FLAGGED },
    { "fail-on-flags", no_argument, NULL, OPT_FAIL },
    { "db", required_argument, NULL, OPT_DB },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    const char *lot, *db;
    sl_analyze_view view;
    int only_flagged, fail_on_flags;
    cli_format format;
} compare_args;

/* What the streamed tables read from while the document prints. */
typedef struct {
    const compare_args *args;
    sl_analysis_stream *stream;
    const sl_analysis *a;
    sl_status status;
    sl_diag *diag;
} compare_rows;

static void device_row(cli_table *t, const sl_analysis *a, const sl_analyze_device *d, int table)
{
    const char *names[7];
    cli_table_row(t);
    cli_cell_str(t, d->wafer);
    cli_cell_str(t, d->device);
    if (!table) {
        cli_cell_int(t, d->die_x);
        cli_cell_int(t, d->die_y);
    }
    cli_cell_str(t, a->plan->splits[d->split].name);
    cli_cell_num(t, d->cnp_predicted_V);
    cli_cell_num(t, d->cnp_predicted_sigma_V);
    cli_cell_num(t, d->cnp_measured_V);
    cli_cell_num(t, d->deviation_V);
    cli_cell_num(t, d->z);
    cli_cell_num(t, d->doping_measured_per_cm2);
    if (!table)
        cli_cell_num(t, d->modified_z);
    cli_cell_list(t, names, sl_analyze_flag_names(d, names));
    if (table && a->n_with_hysteresis > 0)
        cli_cell_num(t, d->hysteresis_V);
    if (table)
        return;
    double numbers[] = { d->mobility_cm2_per_Vs, d->n0_per_cm2, d->r_contact_ohm, d->hysteresis_V,
                         d->floor_predicted_per_cm2, d->channel_length_um, d->channel_width_um };
    cli_cell_int(t, d->measurements);
    for (size_t i = 0; i < sizeof numbers / sizeof numbers[0]; i++)
        cli_cell_num(t, numbers[i]);
}

static int device_rows(cli_table *t, void *ctx)
{
    compare_rows *c = ctx;
    const sl_analyze_device *d = NULL;
    while ((c->status = sl_analysis_stream_next_device(c->stream, &d, c->diag)) == SL_OK && d)
        if (!c->args->only_flagged || d->flags)
            device_row(t, c->a, d, c->args->format == CLI_FORMAT_TABLE);
    return c->status != SL_OK;
}

static void devices_table(cli_doc *doc, compare_rows *rows)
{
    int table = rows->args->format == CLI_FORMAT_TABLE;
    cli_table *t = cli_doc_table_streamed(doc, "devices", "devices (V; doping in cm^-2)",
                                          device_rows, rows);
    cli_table_col_str(t, "wafer", "wafer");
    cli_table_col_str(t, "device", "device");
    if (!table) {
        cli_table_col_int(t, "die_x", "x");
        cli_table_col_int(t, "die_y", "y");
    }
    cli_table_col_str(t, "split", "split");
    cli_table_col_fixed(t, "cnp_predicted_V", "pred", 2);
    cli_table_col_fixed(t, "cnp_predicted_sigma_V", "+/-", 2);
    cli_table_col_fixed(t, "cnp_measured_V", "meas", 2);
    cli_table_col_fixed(t, "deviation_V", "dev", 2);
    cli_table_col_fixed(t, "z", "z", 2);
    cli_table_col_num(t, "doping_measured_per_cm2", "doping", 3);
    if (!table)
        cli_table_col_fixed(t, "modified_z", "M", 2);
    cli_table_col_list(t, "flags", "flags");
    if (table && rows->a->n_with_hysteresis > 0) /* a lot of double sweeps */
        cli_table_col_fixed(t, "hysteresis_V", "hyst", 2);
    if (table)
        return;
    cli_table_col_int(t, "measurements", "n");
    cli_table_col_num(t, "mobility_cm2_per_Vs", "mu", 6);
    cli_table_col_num(t, "n0_per_cm2", "n0", 6);
    cli_table_col_num(t, "r_contact_ohm", "Rc", 6);
    cli_table_col_num(t, "hysteresis_V", "hyst", 6);
    cli_table_col_num(t, "floor_predicted_per_cm2", "nth", 6);
    cli_table_col_num(t, "channel_length_um", "L", 6);
    cli_table_col_num(t, "channel_width_um", "W", 6);
}

/* Every measurement run of the lot, the view's marked. */
static void runs_table(cli_doc *doc, const sl_analysis *a, int table)
{
    cli_table *t = cli_doc_table(doc, "runs", "measurement runs of the lot (* in the view shown)");
    cli_table_col_int(t, "run", "run");
    cli_table_col_str(t, "step", "step");
    cli_table_col_num(t, "temperature_K", "T [K]", 6);
    cli_table_col_int(t, "devices", "devices");
    cli_table_col_int(t, "current", "current");
    cli_table_col_int(t, "plan_revision", "rev");
    cli_table_col_str(t, "source", "source");
    cli_table_col_str(t, "source_sha256", "sha256");
    cli_table_col_str(t, "imported_utc", "imported");
    cli_table_col_bool(t, "in_view", "*");
    for (size_t i = 0; i < a->n_runs; i++) {
        const sl_store_run *r = &a->runs[i];
        char sha[16];
        snprintf(sha, sizeof sha, "%.12s", r->source_sha256); /* enough to tell files apart */
        cli_table_row(t);
        cli_cell_int(t, r->id);
        cli_cell_str(t, r->step);
        cli_cell_num(t, r->temperature_K);
        cli_cell_int(t, r->devices);
        cli_cell_int(t, r->current);
        cli_cell_int(t, r->revision);
        cli_cell_str(t, r->source_name);
        cli_cell_str(t, table ? sha : r->source_sha256);
        cli_cell_str(t, r->created_utc);
        /* in the view: of its step and temperature, with a measurement still current */
        cli_cell_bool(t, strcmp(r->step, a->step) == 0 && r->temperature_K == a->temperature_K &&
                             r->current > 0);
    }
}

static void splits_table(cli_doc *doc, const sl_analysis *a)
{
    cli_table *t = cli_doc_table(doc, "splits",
                                 "splits (neutrality voltage, V, from wafer means; 95 % CI by "
                                 "Student t with wafers - 1 df; mobility cm^2/Vs, n0 cm^-2 and "
                                 "hysteresis V: median and spread = 1.4826 MAD of the usable "
                                 "devices; mu off: median outside the plan's expected mobility "
                                 "+/- 3 sigma)");
    cli_table_col_str(t, "split", "split");
    cli_table_col_int(t, "devices", "dev");
    cli_table_col_int(t, "usable", "ok");
    cli_table_col_int(t, "censored", "cens");
    cli_table_col_int(t, "wafers", "wafers");
    cli_table_col_fixed(t, "cnp_predicted_V", "pred", 2);
    cli_table_col_fixed(t, "cnp_mean_V", "mean", 2);
    cli_table_col_fixed(t, "cnp_wafer_sd_V", "wafer sd", 2);
    cli_table_col_range(t, "cnp_ci95_V", "95% CI", 3);
    cli_table_col_fixed(t, "bias_V", "bias", 2);
    cli_table_col_bool(t, "prediction_in_ci", "in CI");
    cli_table_col_int(t, "flagged", "flagged");
    cli_table_col_num(t, "mobility_median_cm2_per_Vs", "mu med", 4);
    cli_table_col_num(t, "mobility_spread_cm2_per_Vs", "mu spr", 2);
    cli_table_col_num(t, "n0_median_per_cm2", "n0 med", 3);
    cli_table_col_num(t, "n0_spread_per_cm2", "n0 spr", 2);
    cli_table_col_num(t, "hysteresis_median_V", "hyst med", 3);
    cli_table_col_num(t, "hysteresis_spread_V", "hyst spr", 2);
    cli_table_col_num(t, "mobility_expected_cm2_per_Vs", "mu exp", 4);
    cli_table_col_num(t, "mobility_expected_sigma_cm2_per_Vs", "+/-", 2);
    cli_table_col_bool(t, "mobility_off_plan", "mu off");
    for (size_t s = 0; s < a->n_splits; s++) {
        const sl_analyze_split *sp = &a->splits[s];
        cli_table_row(t);
        cli_cell_str(t, a->plan->splits[s].name);
        cli_cell_int(t, (long)sp->n_devices);
        cli_cell_int(t, (long)sp->n_usable);
        cli_cell_int(t, (long)sp->n_censored);
        cli_cell_int(t, (long)sp->n_wafers);
        cli_cell_num(t, sp->cnp_predicted_V);
        cli_cell_num(t, sp->cnp.mean);
        cli_cell_num(t, sp->cnp.sd);
        cli_cell_range(t, sp->cnp.ci_low, sp->cnp.ci_high);
        cli_cell_num(t, sp->bias_V);
        if (sp->n_wafers >= 2)
            cli_cell_bool(t, sp->prediction_in_ci);
        else
            cli_cell_num(t, NAN);
        cli_cell_int(t, (long)sp->n_flagged);
        cli_cell_num(t, sp->mobility_median_cm2_per_Vs);
        cli_cell_num(t, sp->mobility_spread_cm2_per_Vs);
        cli_cell_num(t, sp->n0_median_per_cm2);
        cli_cell_num(t, sp->n0_spread_per_cm2);
        cli_cell_num(t, sp->hysteresis_median_V);
        cli_cell_num(t, sp->hysteresis_spread_V);
        cli_cell_num(t, sp->mobility_expected_cm2_per_Vs);
        cli_cell_num(t, sp->mobility_expected_sigma_cm2_per_Vs);
        if (sp->mobility_off_plan >= 0)
            cli_cell_bool(t, sp->mobility_off_plan);
        else
            cli_cell_num(t, NAN);
    }
}

static void effects_table(cli_doc *doc, const sl_analysis *a)
{
    cli_table *t = cli_doc_table(doc, "effects",
                                 "level effects (doping, cm^-2, difference from the reference level; "
                                 "wafer means, 95 % CI with the residual df)");
    cli_table_col_str(t, "factor", "factor");
    cli_table_col_str(t, "level", "level");
    cli_table_col_str(t, "reference", "vs");
    cli_table_col_num(t, "planned_per_cm2", "planned", 3);
    cli_table_col_num(t, "planned_sigma_per_cm2", "+/-", 2);
    cli_table_col_num(t, "tolerance_per_cm2", "tol", 2);
    cli_table_col_num(t, "estimated_per_cm2", "estimated", 3);
    cli_table_col_num(t, "stderr_per_cm2", "SE", 2);
    cli_table_col_num(t, "df", "df", 3);
    cli_table_col_range(t, "ci95_per_cm2", "95% CI", 3);
    cli_table_col_str(t, "verdict", "verdict");
    cli_table_col_int(t, "wafers", "wafers");
    cli_table_col_list(t, "flags", "flags");
    for (size_t i = 0; i < a->n_effects; i++) {
        const sl_analyze_effect *e = &a->effects[i];
        const char *flag = sl_stats_verdict_name(e->verdict);
        cli_table_row(t);
        cli_cell_str(t, e->factor);
        cli_cell_str(t, e->level);
        cli_cell_str(t, e->is_intercept ? "-" : e->reference);
        cli_cell_num(t, e->planned_per_cm2);
        cli_cell_num(t, e->planned_sigma_per_cm2);
        cli_cell_num(t, e->tolerance_per_cm2);
        cli_cell_num(t, e->estimated_per_cm2);
        cli_cell_num(t, e->stderr_per_cm2);
        cli_cell_num(t, isfinite(e->estimated_per_cm2) ? e->df : NAN);
        cli_cell_range(t, e->ci_low_per_cm2, e->ci_high_per_cm2);
        cli_cell_str(t, flag);
        cli_cell_int(t, (long)e->n_wafers);
        cli_cell_list(t, &flag, e->off_plan ? 1 : 0);
    }
}

static int failure_rows(cli_table *t, void *ctx)
{
    compare_rows *c = ctx;
    const sl_analyze_device *d = NULL;
    long rank = 0;
    while ((c->status = sl_analysis_stream_next_flagged(c->stream, &d, c->diag)) == SL_OK && d) {
        cli_table_row(t);
        cli_cell_int(t, ++rank);
        cli_cell_str(t, d->wafer);
        cli_cell_str(t, d->device);
        cli_cell_int(t, d->die_x);
        cli_cell_int(t, d->die_y);
        cli_cell_str(t, c->a->plan->splits[d->split].name);
        cli_cell_str(t, d->reason);
    }
    return c->status != SL_OK;
}

static void failure_table(cli_doc *doc, compare_rows *rows)
{
    cli_table *t = cli_doc_table_streamed(doc, "failure_analysis",
                                          "failure analysis, most severe first", failure_rows, rows);
    cli_table_col_int(t, "rank", "#");
    cli_table_col_str(t, "wafer", "wafer");
    cli_table_col_str(t, "device", "device");
    cli_table_col_int(t, "die_x", "x");
    cli_table_col_int(t, "die_y", "y");
    cli_table_col_str(t, "split", "split");
    cli_table_col_str(t, "reason", "reason");
}

/* Notes on what an interval rests on, censoring and the outlier rule. */
static void add_notes(cli_doc *doc, const sl_analysis *a)
{
    char text[512];
    const sl_stats_anova *an = &a->anova;
    snprintf(text, sizeof text,
             "ANOVA of wafer-mean doping across %zu splits (%zu wafers): F(%g, %g) = %.4g, p = %.3g.",
             an->n_groups, an->n_total, an->df_between, an->df_within, an->f, an->p);
    cli_doc_note(doc, text);
    for (size_t s = 0; s < a->n_splits; s++)
        if (a->splits[s].n_wafers == 1) {
            snprintf(text, sizeof text, "split %s: one wafer: no interval.", a->plan->splits[s].name);
            cli_doc_note(doc, text);
        }
    snprintf(text, sizeof text,
             "verdicts: the 95 %% interval of estimate - planned against the tolerance T: "
             "as-planned inside [-T, T], off-plan entirely outside, differs excludes 0 only, "
             "inconclusive otherwise.");
    cli_doc_note(doc, text);
    if (a->n_wafers_censored_biased) {
        snprintf(text, sizeof text,
                 "%zu wafer(s) with devices beyond the sweep have no device scatter to fit a "
                 "censored mean with: their means are those of the devices inside the sweep, "
                 "biased towards it.", a->n_wafers_censored_biased);
        cli_doc_note(doc, text);
    }
    snprintf(text, sizeof text,
             "outliers: |modified z| > 3.5 of the residual from the wafer median (MAD pooled per "
             "dielectric) flags about %.2g of these %zu devices by chance even when all are good.",
             a->outliers_expected, a->n_outlier_scored);
    cli_doc_note(doc, text);
}

/* Splits with more than 10 % of their devices beyond the sweep, on stderr. */
static void warn_censored(const sl_analysis *a)
{
    for (size_t s = 0; s < a->n_splits; s++) {
        const sl_analyze_split *sp = &a->splits[s];
        size_t seen = sp->n_usable + sp->n_censored;
        if (seen && (double)sp->n_censored > SL_ANALYZE_CENSORED_WARN * (double)seen)
            fprintf(stderr,
                    "splitlot: warning: split %s: %zu of %zu devices have their neutrality point "
                    "beyond the sweep; its wafer means are censored-normal maximum-likelihood "
                    "estimates\n",
                    a->plan->splits[s].name, sp->n_censored, seen);
    }
}

static void add_summary(cli_doc *doc, const sl_analysis *a)
{
    cli_doc_str(doc, "lot", a->lot.lot);
    cli_doc_num(doc, "plan_revision", a->revision, 6);
    cli_doc_str(doc, "step", a->step);
    cli_doc_num(doc, "temperature_K", a->temperature_K, 6);
    cli_doc_num(doc, "device_count", (double)a->n_devices, 15); /* "devices" is the table */
    cli_doc_num(doc, "usable", (double)a->n_usable, 15);
    cli_doc_num(doc, "censored", (double)a->n_censored, 15);
    cli_doc_num(doc, "flagged", (double)a->n_flagged, 15);
    cli_doc_num(doc, "outliers_expected", a->outliers_expected, 3);
    cli_doc_num(doc, "levels_off_plan", (double)a->n_verdict[SL_VERDICT_OFF_PLAN], 15);
    cli_doc_num(doc, "levels_differing", (double)a->n_verdict[SL_VERDICT_DIFFERS], 15);
    cli_doc_num(doc, "splits_mobility_off_plan", (double)a->n_splits_mobility_off, 15);
    cli_doc_num(doc, "device_sigma_V", a->device_sigma_V, 3);
    cli_doc_num(doc, "wafer_sigma_per_cm2", a->wafer_sigma_per_cm2, 3);
    if (a->plan->n_batches) /* the load as a random effect */
        cli_doc_num(doc, "batch_sigma_per_cm2", a->load_sigma_per_cm2, 3);
    cli_doc_num(doc, "anova.F", a->anova.f, 5);
    cli_doc_num(doc, "anova.df_between", a->anova.df_between, 15);
    cli_doc_num(doc, "anova.df_within", a->anova.df_within, 15);
    cli_doc_num(doc, "anova.p", a->anova.p, 3);
    if (a->effects_status != SL_OK) {
        cli_doc_str(doc, "effects_note", a->effects_note);
        cli_doc_note(doc, a->effects_note);
    }
    add_notes(doc, a);
}

/* Print the analysis; the devices and the failure list are read as printed. */
static int print_compare(const compare_args *args, sl_analysis_stream *stream, sl_diag *diag)
{
    compare_rows rows = { args, stream, sl_analysis_stream_summary(stream), SL_OK, diag };
    const sl_analysis *a = rows.a;
    cli_doc *doc = cli_doc_new();
    warn_censored(a);
    add_summary(doc, a);
    runs_table(doc, a, args->format == CLI_FORMAT_TABLE);
    devices_table(doc, &rows);
    splits_table(doc, a);
    effects_table(doc, a);
    failure_table(doc, &rows);
    int rc = CLI_EXIT_OK;
    if (cli_doc_print(doc, args->format, stdout) != 0)
        rc = rows.status != SL_OK ? cli_fail(rows.status, diag)
                                  : cli_runtime_error("cannot write output");
    else if (args->fail_on_flags && (a->n_flagged || a->n_off_plan || a->n_splits_mobility_off))
        rc = CLI_EXIT_FLAGGED;
    cli_doc_free(doc);
    return rc;
}

static int run_compare(const compare_args *args)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_analysis_stream *stream = NULL;
    sl_status st = sl_store_open(&store, args->db, diag);
    if (st == SL_OK) {
        cli_busy *busy = cli_busy_start("compare");
        st = sl_analyze_lot_stream_view(&stream, store, args->lot, &args->view, diag);
        cli_busy_stop(busy);
    }
    int rc = st == SL_OK ? print_compare(args, stream, diag) : cli_fail(st, diag);
    sl_analysis_stream_free(stream);
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}

int cmd_compare(int argc, char **argv)
{
    compare_args a = { .format = CLI_FORMAT_TABLE, .view = { NULL, NAN } };
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: return cli_print_help(usage);
        case OPT_LOT: a.lot = optarg; break;
        case OPT_STEP:
            if (cli_check_step(optarg) != 0)
                return CLI_EXIT_USAGE;
            a.view.step = optarg;
            break;
        case OPT_TEMPERATURE:
            if (cli_parse_temperature(optarg, &a.view.temperature_K) != 0)
                return CLI_EXIT_USAGE;
            break;
        case OPT_ONLY_FLAGGED: a.only_flagged = 1; break;
        case OPT_FAIL: a.fail_on_flags = 1; break;
        case OPT_DB: a.db = optarg; break;
        case OPT_FORMAT:
            if (cli_format_parse(optarg, &a.format) != 0)
                return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
            break;
        default: return cli_bad_option("compare", argv[optind - 1]);
        }
    }
    if (optind < argc)
        return cli_usage_error("compare: unexpected argument '%s'", argv[optind]);
    if (!a.lot)
        return cli_usage_error("compare: --lot is required (see 'splitlot compare --help')");
    a.db = cli_db_path(a.db);
    if (cli_require_db(a.db) != 0)
        return CLI_EXIT_USAGE;
    return run_compare(&a);
}
