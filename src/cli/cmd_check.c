/* SPDX-License-Identifier: MIT
 * `splitlot check PLAN`: read and validate a plan, print every problem as
 * PLAN:LINE:COL on stderr and a one-line summary on stdout when it is usable.
 * Exit 2 when the plan has errors; warnings alone keep exit 0.
 */
#include "cli.h"

#include <getopt.h>
#include <string.h>

#include "splitlot/plan.h"

static const char usage[] =
    "usage: splitlot check PLAN\n\n"
    "Validate a lot plan (YAML): every problem is reported as PLAN:LINE:COL with a\n"
    "did-you-mean where a near name exists. Exit 0 when the plan is usable (warnings\n"
    "are printed but allowed), 2 when it has errors.\n\n"
    "  --help   this text\n";

static const struct option options[] = {
    { "help", no_argument, NULL, 'h' },
    { NULL, 0, NULL, 0 },
};

static void print_summary(const sl_plan *plan, size_t warnings)
{
    printf("%s: ok: lot %s, %zu splits, %zu wafers", plan->path, plan->lot, plan->n_splits,
           plan->n_wafers);
    if (warnings)
        printf(", %zu warning%s", warnings, warnings == 1 ? "" : "s");
    putchar('\n');
}

int cmd_check(int argc, char **argv)
{
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == 'h')
            return cli_print_help(usage);
        return cli_bad_option("check", argv[optind - 1]);
    }
    if (optind + 1 != argc)
        return cli_usage_error("check: give exactly one plan file (see 'splitlot check --help')");
    sl_diag *diag = sl_diag_new();
    if (!diag)
        return cli_runtime_error("out of memory");
    sl_plan *plan = NULL;
    sl_status st = sl_plan_load(&plan, argv[optind], diag);
    cli_print_diag(diag);
    int rc = sl_status_exit_code(st);
    if (st == SL_OK)
        print_summary(plan, sl_diag_count(diag, SL_SEV_WARNING));
    else if (sl_diag_size(diag) == 0)
        fprintf(stderr, "splitlot: error: %s\n", sl_status_str(st));
    sl_plan_free(plan);
    sl_diag_free(diag);
    return rc;
}
