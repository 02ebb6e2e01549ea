/* SPDX-License-Identifier: MIT
 * `splitlot report --lot ID --out FILE.html`: the lot's analysis rendered as
 * one self-contained HTML page (inline SVG and CSS), written atomically; a
 * one-line summary of what the page holds goes to stdout.
 */
#include "cli.h"

#include <getopt.h>
#include <stdio.h>
#include <errno.h>
#include <stdlib.h>
#include <time.h>

#include "splitlot/report.h"

static const char usage[] =
    "usage: splitlot report --lot ID --out FILE.html [options]\n\n"
    "Write one self-contained HTML page for a lot (inline charts and styles, no\n"
    "scripts, no external files), readable on screen and printed: the verdicts,\n"
    "every split's neutrality voltages against the predicted bands, a map per\n"
    "wafer coloured by deviation from prediction, level effects against the plan,\n"
    "transfer curves of the most severe flagged devices, the history across lots\n"
    "when the database holds more than one, and the failure-analysis list.\n"
    "The file is written to FILE.tmp first and renamed, so it is never half there.\n\n"
    "  --lot ID                  the lot\n"
    "  --out FILE                the HTML file to write\n"
    "  --step NAME               measurements after this process step (default: the\n"
    "                            step of the lot's newest measurement run)\n"
    "  --temperature-K T         measurements at this plan temperature (default: the\n"
    "                            plan's first temperature with measurements)\n"
    "  --max-curves N            transfer curves of flagged devices (default 12)\n"
    "  --no-history              leave out the history across lots\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --help                    this text\n";

enum { OPT_LOT = 1, OPT_OUT, OPT_STEP, OPT_TEMPERATURE, OPT_MAX_CURVES, OPT_NO_HISTORY, OPT_DB,
       OPT_HELP };

static const struct option options[] = {
    { "lot", required_argument, NULL, OPT_LOT },
    { "out", required_argument, NULL, OPT_OUT },
    { "step", required_argument, NULL, OPT_STEP },
    { "temperature-K", required_argument, NULL, OPT_TEMPERATURE },
    { "max-curves", required_argument, NULL, OPT_MAX_CURVES },
    { "no-history", no_argument, NULL, OPT_NO_HISTORY },
    { "db", required_argument, NULL, OPT_DB },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    const char *lot, *out, *db;
    int help;
    sl_report_options opts;
} report_args;

static void print_summary(const report_args *args, const sl_report_summary *s)
{
    printf("wrote %s: %zu bytes; %zu strip charts, %zu wafer maps with %zu dies, "
           "%zu transfer curves, %zu history charts; measurements at step %s, %g K\n",
           args->out, s->bytes, s->n_strip_charts, s->n_wafer_maps, s->n_dies, s->n_curves,
           s->n_history_levels, s->step, s->temperature_K);
    if (s->n_dies_off_grid)
        fprintf(stderr, "splitlot: warning: %zu devices lie outside the plan's die grid and "
                "are not on the wafer maps\n", s->n_dies_off_grid);
}

static int run_report(const report_args *args)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    sl_report_summary summary;
    sl_status st = sl_store_open(&store, args->db, diag);
    if (st == SL_OK) {
        cli_busy *busy = cli_busy_start("report");
        st = sl_report_lot(&summary, store, args->lot, args->out, &args->opts, diag);
        cli_busy_stop(busy);
    }
    int rc = st == SL_OK ? CLI_EXIT_OK : cli_fail(st, diag);
    if (st == SL_OK)
        print_summary(args, &summary);
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}

static int parse_options(report_args *a, int argc, char **argv)
{
    int opt;
    long n;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: a->help = 1; return 0;
        case OPT_LOT: a->lot = optarg; break;
        case OPT_OUT: a->out = optarg; break;
        case OPT_STEP:
            if (cli_check_step(optarg) != 0)
                return CLI_EXIT_USAGE;
            a->opts.view.step = optarg;
            break;
        case OPT_TEMPERATURE:
            if (cli_parse_temperature(optarg, &a->opts.view.temperature_K) != 0)
                return CLI_EXIT_USAGE;
            break;
        case OPT_MAX_CURVES:
            if (cli_parse_long("--max-curves", optarg, 0, &n) != 0)
                return CLI_EXIT_USAGE;
            a->opts.max_curves = (size_t)n;
            break;
        case OPT_NO_HISTORY: a->opts.with_history = 0; break;
        case OPT_DB: a->db = optarg; break;
        default: return cli_bad_option("report", argv[optind - 1]);
        }
    }
    return 0;
}

/* SOURCE_DATE_EPOCH (seconds since 1970, the reproducible-builds
 * convention) as the report's time, so that one lot gives one page
 * byte for byte; 0 when unset or not a time. */
static int fixed_report_time(char out[32])
{
    const char *text = getenv("SOURCE_DATE_EPOCH");
    if (!text || !*text)
        return 0;
    char *end = NULL;
    errno = 0;
    long long seconds = strtoll(text, &end, 10);
    if (errno || *end || seconds < 0)
        return 0;
    sl_report_time_text(out, (time_t)seconds);
    return 1;
}

int cmd_report(int argc, char **argv)
{
    report_args a = { 0 };
    sl_report_options_default(&a.opts);
    int rc = parse_options(&a, argc, argv);
    if (rc != 0)
        return rc;
    if (a.help)
        return cli_print_help(usage);
    if (optind < argc)
        return cli_usage_error("report: unexpected argument '%s'", argv[optind]);
    if (!a.lot)
        return cli_usage_error("report: --lot is required (see 'splitlot report --help')");
    if (!a.out)
        return cli_usage_error("report: --out is required (see 'splitlot report --help')");
    a.db = cli_db_path(a.db);
    if (cli_require_db(a.db) != 0)
        return CLI_EXIT_USAGE;
    char fixed[32];
    if (fixed_report_time(fixed))
        a.opts.generated_utc = fixed;
    return run_report(&a);
}
